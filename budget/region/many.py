"""Every feature of a region file as a named region (many basins in one pass).

    rs = load_regions("basins.geojson", id_property="code")
    rs.raise_if_invalid()            # or keep going: rs.regions are the valid ones
    for item in rs.regions: item.id, item.region

Ids come from the property named by ``id_property``; by default from ``name``, else ``id``
(a property, or the GeoJSON feature's own "id" member), else the feature's 0-based index.
Two features with the same id are refused with one sentence.  A feature that fails
validation does not stop the others: it is listed in :attr:`RegionSet.problems` with the
sentence that names it, so the caller can refuse (``raise_if_invalid``) or run the rest.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..errors import RegionError
from .features import FeatureSet, region_from_feature
from .model import Region
from .readers import read_features

#: Properties tried for a feature's id when no ``id_property`` is given, in this order.
DEFAULT_ID_PROPERTIES = ("name", "id")


@dataclass(frozen=True)
class NamedRegion:
    """One valid feature: its id (the region's name), its 0-based index and its Region."""

    id: str
    index: int
    region: Region


@dataclass(frozen=True)
class FeatureProblem:
    """One feature that failed validation: its id, index and the one-sentence reason."""

    id: str
    index: int
    message: str


@dataclass
class RegionSet:
    """Every feature of one source: the valid ones as named regions, the others as problems."""

    regions: list[NamedRegion]
    problems: list[FeatureProblem]
    source: str  # the file name (or "the region text") for messages
    id_property: str | None  # the property the ids came from (None: name → id → index)
    warnings: list[str] = field(default_factory=list)

    @property
    def ids(self) -> list[str]:
        return [r.id for r in self.regions]

    @property
    def ok(self) -> bool:
        return not self.problems

    def raise_if_invalid(self) -> None:
        """Refuse the whole set with one sentence when any feature failed validation."""
        if not self.problems:
            return
        first = self.problems[0]
        if len(self.problems) == 1:
            raise RegionError(
                f"Feature '{first.id}' of {self.source} is not a valid region: "
                f"{_lower_first(first.message)} Fix it, or skip invalid features "
                "(--skip-invalid) to compute the others."
            )
        names = ", ".join(f"'{p.id}'" for p in self.problems[:10])
        more = f" and {len(self.problems) - 10} more" if len(self.problems) > 10 else ""
        raise RegionError(
            f"{len(self.problems)} features of {self.source} are not valid regions ({names}"
            f"{more}); the first: {_lower_first(first.message)} Fix them, or skip invalid "
            "features (--skip-invalid) to compute the others."
        )


def _lower_first(text: str) -> str:
    return text[:1].lower() + text[1:] if text[:2] != text[:2].upper() else text


def load_regions(source, id_property: str | None = None, great_circle: bool = False,
                 filename: str | None = None) -> RegionSet:
    """Every feature of a GeoJSON FeatureCollection, shapefile or zip as named regions.

    ``source`` is anything :func:`budget.region.read_features` accepts (``filename`` names
    uploaded data).  Raises RegionError when the file cannot be read, when a feature lacks
    the ``id_property`` or when two features share an id; per-feature validation failures
    are collected in the result instead.
    """
    fs = read_features(source, filename=filename)
    shown = f"'{fs.where[5:-1]}'" if fs.where.startswith(" in '") else "the region"
    ids = _feature_ids(fs, id_property, shown)
    regions, problems = [], []
    for idx, (fid, feat) in enumerate(zip(ids, fs.features)):
        try:
            region = region_from_feature(fs, idx, feat, name=fid,
                                         great_circle=great_circle or None)
        except RegionError as exc:
            problems.append(FeatureProblem(fid, idx, str(exc)))
            continue
        regions.append(NamedRegion(fid, idx, region))
    return RegionSet(regions, problems, shown, id_property, list(fs.warnings))


def _feature_ids(fs: FeatureSet, id_property: str | None, shown: str) -> list[str]:
    ids = [_feature_id(feat, idx, id_property, shown) for idx, feat in enumerate(fs.features)]
    seen: dict[str, int] = {}
    for idx, fid in enumerate(ids):
        if fid in seen:
            prop = f"'{id_property}'" if id_property else "name"
            raise RegionError(
                f"Features {seen[fid]} and {idx} of {shown} share the id '{fid}'; give each "
                f"feature a unique {prop}, or take the ids from another property "
                "(--id-property NAME)."
            )
        seen[fid] = idx
    return ids


def _feature_id(feat, idx: int, id_property: str | None, shown: str) -> str:
    props = feat.get("properties") if isinstance(feat, dict) else None
    props = props if isinstance(props, dict) else {}
    if id_property is not None:
        value = props.get(id_property)
        if value in (None, ""):
            have = ", ".join(sorted(map(str, props))[:12]) or "none"
            raise RegionError(
                f"Feature {idx} of {shown} has no property '{id_property}' to take its id "
                f"from (its properties: {have}); choose a property every feature has "
                "(--id-property NAME)."
            )
        return _text(value)
    for key in DEFAULT_ID_PROPERTIES:
        if props.get(key) not in (None, ""):
            return _text(props[key])
    if isinstance(feat, dict) and feat.get("id") not in (None, ""):
        return _text(feat["id"])
    return str(idx)


def _text(value) -> str:
    """An id as text: 12.0 from a shapefile's numeric field becomes "12"."""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()
