"""Benchmarks of Fluxfence (not part of the test suite); see README.md here."""
