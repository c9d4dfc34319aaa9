"""Regions: polygons in longitude-latitude, read, validated and normalised.

    from budget.region import load_region, list_features
    region = load_region("basins.geojson", feature="Upper Vale")   # or bbox="5,43,17,49"

Modules: ``model`` (Region, Part, Ring and the RFC 7946 writer), ``normalise`` (continuous
longitude frame across the dateline, poles, orientation, edge names), ``validate``
(crossings, holes, overlaps), ``box`` (a bbox and drawn vertices), ``features`` (picking and
naming features, one feature to a Region), ``readers`` (the one table of file formats:
GeoJSON, shapefile, zipped shapefile, from paths or uploads), ``geojson``, ``shp`` and
``archive`` (the readers, with the expanded-size cap) and ``many`` (every feature of a file
as named regions).

Every problem with the input raises :class:`budget.errors.RegionError` with one sentence that
names the culprit (file, feature, vertex or edge) and says what to do.
"""

from .archive import SHAPEFILE_LIMIT_BYTES, UPLOAD_EXPANDED_LIMIT_BYTES
from .box import region_from_bbox, region_from_vertices
from .features import FeatureSet
from .many import FeatureProblem, NamedRegion, RegionSet, load_regions
from .model import Part, Region, Ring
from .normalise import LON_LIMIT
from .readers import (
    READERS,
    Reader,
    list_features,
    load_region,
    read_features,
    region_from_geojson,
    region_from_shapefile,
    region_from_upload,
)

__all__ = [
    "Ring",
    "Part",
    "Region",
    "region_from_bbox",
    "region_from_vertices",
    "region_from_geojson",
    "region_from_shapefile",
    "region_from_upload",
    "list_features",
    "load_region",
    "load_regions",
    "RegionSet",
    "NamedRegion",
    "FeatureProblem",
    "FeatureSet",
    "Reader",
    "READERS",
    "read_features",
    "LON_LIMIT",
    "SHAPEFILE_LIMIT_BYTES",
    "UPLOAD_EXPANDED_LIMIT_BYTES",
]
