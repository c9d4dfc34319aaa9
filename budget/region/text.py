"""Small text helpers for the region package's messages (coordinates, numbers)."""

from __future__ import annotations


def fmt_lon(lon: float) -> str:
    x = (float(lon) + 180.0) % 360.0 - 180.0
    if x == -180.0 and lon > 0:
        x = 180.0
    return f"{abs(x):.1f}°{'E' if x >= 0 else 'W'}"


def fmt_lat(lat: float) -> str:
    return f"{abs(float(lat)):.1f}°{'N' if lat >= 0 else 'S'}"


def fmt_point(lon: float, lat: float) -> str:
    return f"({fmt_lon(lon)}, {fmt_lat(lat)})"


def cap(text: str) -> str:
    """Text to start a sentence with, or '' ('part 2 ' -> 'Part 2 ')."""
    return text[:1].upper() + text[1:]


def num(x: float) -> str:
    return f"{x:g}"
