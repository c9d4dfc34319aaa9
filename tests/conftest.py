"""Shared fixtures of the test suite.

Everything here builds invented data (not weather) in a temporary folder; nothing is
committed as a binary.
"""

from __future__ import annotations

import pytest

from budget import testing


@pytest.fixture
def write_nc(tmp_path):
    """``write_nc(dataset, "name.nc")`` writes a Dataset to the test's folder, returns the path."""

    def write(ds, name):
        path = tmp_path / name
        ds.to_netcdf(path)
        return path

    return write


@pytest.fixture
def small_levels():
    """A 12-step hourly level Dataset of uniform invented values (budget.testing.level_dataset)."""
    return testing.level_dataset(nt=12)
