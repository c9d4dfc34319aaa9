"""Helpers shared by the region tests (tests/test_region*.py).

The shapes are invented test basins, a scenario of our own, not real places.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import shapefile  # pyshp

from budget.constants import EARTH_RADIUS
from budget.errors import RegionError

R = EARTH_RADIUS
DATA = Path(__file__).parent / "data" / "regions"


def box_area(west, south, east, north):
    """Analytic area of a lon-lat box: R² Δλ (sin φ2 − sin φ1) (CHECKS.md, derived)."""
    return R**2 * np.radians(east - west) * (np.sin(np.radians(north)) - np.sin(np.radians(south)))


def raises(fn, *args, **kwargs) -> str:
    """The RegionError message of fn(*args, **kwargs), checked to be one sentence."""
    with pytest.raises(RegionError) as info:
        fn(*args, **kwargs)
    msg = str(info.value)
    assert msg.endswith("."), msg  # one sentence
    assert "\n" not in msg
    return msg


def write_shapefile(folder: Path, stem="basins", prj=None, transform=None):
    """Two invented basins; rings clockwise outside, counter-clockwise holes (shapefile rule)."""
    outer = [[0, 0], [0, 10], [10, 10], [10, 0], [0, 0]]  # clockwise
    hole = [[2, 2], [4, 2], [4, 4], [2, 4], [2, 2]]  # counter-clockwise
    second = [[20, 0], [20, 5], [25, 5], [25, 0], [20, 0]]
    if transform is not None:
        outer, hole, second = ([list(transform(x, y)) for x, y in ring] for ring in (outer, hole, second))
    w = shapefile.Writer(str(folder / stem), shapeType=shapefile.POLYGON)
    w.field("name", "C")
    w.field("code", "N")
    w.poly([outer, hole])
    w.record("Upper Vale", 1)
    w.poly([second])
    w.record("Coastal Fen", 2)
    w.close()
    if prj is not None:
        (folder / f"{stem}.prj").write_text(prj)
    return folder / f"{stem}.shp"
