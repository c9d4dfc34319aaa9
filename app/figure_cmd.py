"""`fluxfence figure`: report figures and event animations from fields or a saved budget.

The one code path for the command line and the dashboard's "Report figure" button:
:func:`figure_data` gathers what a figure shows (computing the budget only when no saved
budget is given), app.report draws it.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from budget.errors import RequestError

MAP_STEP_LIMIT = 240  # a period-mean map averages at most this many evenly spaced steps
FRAME_LIMIT = 1500  # an animation of more steps than this is refused: narrow the window
PROFILE_STEP_LIMIT = 2000  # per-level boundary fluxes (the height curtain) kept up to this many steps
NEEDS_MAP = ("map", "report")


def read_budget(path) -> xr.Dataset:
    """A budget written earlier by `fluxfence run ... --netcdf` (or budget.export.write)."""
    p = Path(path)
    if not p.exists():
        raise RequestError(f"The budget file {str(p)!r} does not exist; write one with fluxfence run ... --netcdf FILE.nc.")
    try:
        with xr.open_dataset(p) as opened:
            ds = opened.load()
    except (OSError, ValueError) as exc:
        raise RequestError(f"Cannot read {str(p)!r} as a NetCDF budget ({type(exc).__name__}); "
                           "give a file written by fluxfence run ... --netcdf.") from None
    missing = [k for k in ("precipitable_water", "p_minus_e", "edge_import") if k not in ds]
    if missing or not ds.attrs.get("region_geojson") or "region_area_m2" not in ds.attrs:
        raise RequestError(f"{str(p)!r} is not a Fluxfence budget (no {', '.join(missing) or 'region outline'}); "
                           "give a file written by fluxfence run ... --netcdf.")
    return ds


def read_discharge(path) -> pd.Series:
    """River discharge from a CSV with a `time` column (ISO 8601) and a `discharge_m3_s` column."""
    p = Path(path)
    try:
        frame = pd.read_csv(p)
    except (OSError, ValueError) as exc:
        raise RequestError(f"Cannot read the discharge file {str(p)!r} ({type(exc).__name__}); give a CSV file.") from None
    if "time" not in frame or "discharge_m3_s" not in frame:
        raise RequestError(f"The discharge file {str(p)!r} needs the columns time (ISO 8601) and discharge_m3_s "
                           f"(m³/s); it has {', '.join(map(str, frame.columns))}.")
    try:
        index = pd.DatetimeIndex(pd.to_datetime(frame["time"], utc=True)).tz_localize(None)
    except (ValueError, TypeError):
        raise RequestError(f"The time column of {str(p)!r} is not ISO 8601 (for example 2025-01-15 or 2025-01-15T06:00).") from None
    values = pd.to_numeric(frame["discharge_m3_s"], errors="coerce")
    if values.isna().all():
        raise RequestError(f"The discharge_m3_s column of {str(p)!r} holds no numbers.")
    return pd.Series(values.to_numpy(float), index=index).dropna()


def invented_inputs(paths, region_name: str = "") -> bool:
    """Whether the inputs say they are invented (the sample's global attributes say so)."""
    if "invented" in region_name.lower():
        return True
    from budget.grib import is_grib

    for path in paths:
        if is_grib(str(path)):
            continue  # never the sample; and xarray would write cfgrib's index beside the input
        try:
            with xr.open_dataset(path) as ds:
                text = " ".join(str(ds.attrs.get(k, "")) for k in ("title", "comment", "institution"))
        except Exception:  # an unreadable file says nothing either way
            continue
        if "invented" in text.lower():
            return True
    return False


def mean_snapshot(fields, times) -> tuple[xr.Dataset, int]:
    """Period-mean column fields (IVT, convergence) over the field steps at ``times``."""
    from budget.maps import display_snapshot  # lon-lat view of rotated/projected grids

    steps = np.flatnonzero(np.isin(fields.times, np.asarray(times, "datetime64[ns]")))
    if steps.size == 0:
        raise RequestError("The fields hold none of the budget's time steps; give the fields the budget was computed from.")
    if steps.size > MAP_STEP_LIMIT:
        steps = steps[np.linspace(0, steps.size - 1, MAP_STEP_LIMIT).round().astype(int)]
    total = None
    for i in steps:
        snap = display_snapshot(fields, int(i))[["ivt_u", "ivt_v", "convergence"]].drop_vars("time")
        total = snap if total is None else total + snap
    mean = total / steps.size
    mean["ivt"] = np.hypot(mean["ivt_u"], mean["ivt_v"])  # magnitude of the mean transport
    return mean, int(steps.size)


def snapshots(fields, times) -> list[xr.Dataset]:
    """One column snapshot per budget time step, for animations."""
    from budget.maps import display_snapshot  # lon-lat view of rotated/projected grids

    steps = np.flatnonzero(np.isin(fields.times, np.asarray(times, "datetime64[ns]")))
    return [display_snapshot(fields, int(i)) for i in steps]


def figure_data(fields=None, region=None, budget=None, start=None, end=None, with_map: bool = True,
                source_paths=(), discharge=None):
    """FigureData from opened Fields and a Region (computing the budget), or from a saved budget
    Dataset (with optional Fields for the map).  Returns (FigureData, fields)."""
    from app.report import FigureData
    from budget.region import region_from_geojson

    if budget is None:
        if fields is None or region is None:
            raise RequestError("Give the field files and --region (or --bbox), or a saved budget with --budget FILE.nc.")
        from budget.ledger import compute

        # the curtain's per-level fluxes grow with steps x levels x pieces: kept for events only
        budget = compute(fields, region, profiles=fields.times.size <= PROFILE_STEP_LIMIT)
    else:
        region = region_from_geojson(json.loads(budget.attrs["region_geojson"]), name=budget.attrs.get("region_name"))
        if start or end:
            budget = budget.sel(time=slice(start, end))
        if budget.sizes.get("time", 0) == 0:
            raise RequestError("No budget steps fall between --start and --end; widen the window.")
    paths = list(source_paths) or list(fields.files if fields is not None else json.loads(budget.attrs.get("input_files", "[]")))
    data = FigureData(budget=budget, region=region, source=", ".join(Path(p).name for p in paths[:3]) + (" …" if len(paths) > 3 else ""),
                      invented=invented_inputs(paths[:3], str(budget.attrs.get("region_name", ""))), discharge=discharge)
    if with_map and fields is not None:
        data.mean_map, data.map_steps = mean_snapshot(fields, budget["time"].values)
    return data, fields


def plan_outputs(args, inputs):
    """The command's output transaction (budget.outputs.Outputs), every output checked now,
    before anything is computed: an input, an existing file without --overwrite, a folder given
    as a file, a missing or read-only folder and a name without a known format are refused."""
    from app import report
    from budget.outputs import Outputs

    plan = Outputs(inputs=inputs, overwrite=args.overwrite)
    if args.out:
        plan.file(args.out, "--out", tuple(report.FORMATS))
    if args.animate:
        plan.file(args.animate, "--animate", report.ANIMATION_FORMATS)
    return plan


def cmd_figure(args) -> int:
    from app import report
    from budget.fields import open_fields
    from budget.region import load_region

    if not args.out and not args.animate:
        raise RequestError("Say where to write: --out FIGURE.png|pdf|svg and/or --animate EVENT.mp4|gif.")
    inputs = list(args.fields) + [p for p in (args.budget, args.region, args.discharge) if p]
    plan = plan_outputs(args, inputs)
    if args.animate and not args.fps > 0:
        raise RequestError(f"--fps must be a positive number of frames per second, got {args.fps!r}.")
    style = report.get_style(args.style)
    if args.region and args.bbox:
        raise RequestError("Give either --region or --bbox, not both.")
    budget = read_budget(args.budget) if args.budget else None
    if budget is not None and (args.region or args.bbox):
        raise RequestError("A saved budget carries its own region; drop --region/--bbox or drop --budget.")
    discharge = read_discharge(args.discharge) if args.discharge else None
    needs_fields = args.animate or (args.layout in NEEDS_MAP and budget is None)
    if not args.fields and (needs_fields or budget is None):
        raise RequestError("Give the field files (NetCDF) first: maps, animations and new budgets are drawn from them.")
    fields = open_fields(args.fields, start=args.start, end=args.end) if args.fields else None
    if args.animate and fields is not None and fields.times.size > FRAME_LIMIT:
        raise RequestError(f"The window holds {fields.times.size} time steps, one frame each; animate at most "
                           f"{FRAME_LIMIT} by narrowing --start/--end.")
    region = None
    if budget is None:
        if not args.region and not args.bbox:
            raise RequestError("Say which region: --region FILE (GeoJSON or shapefile) or --bbox W,S,E,N, or a saved --budget FILE.nc.")
        region = load_region(path=args.region, bbox=args.bbox, feature=args.feature)
    with plan:  # staged as each is drawn, committed together; temporaries removed on any exit
        data, fields = figure_data(fields, region, budget, args.start, args.end,
                                   with_map=args.layout in NEEDS_MAP, discharge=discharge)
        stage = lambda path, write: plan.stage(path, write, keep_suffix=True)  # noqa: E731
        if args.out:
            fig = report.render(args.layout, data, style, page=args.page, convergence=args.convergence)
            report.save(fig, args.out, dpi=args.dpi, stage=stage)
        if args.animate:
            if fields is None:
                raise RequestError("An animation needs the field files as well as the budget.")
            report.animate(data, snapshots(fields, data.budget["time"].values), args.animate, style,
                           fps=args.fps, stage=stage)
        written = plan.commit()
    if args.animate and Path(args.animate).suffix.lower() == ".mp4":
        print(f"encoded with {report.ffmpeg_program()[1]}", file=sys.stderr)
    for path in written:
        print(f"wrote {path}")
    return 0


def add_parser(sub) -> None:
    """Register `fluxfence figure` on the CLI's sub-parsers."""
    from app.report import LAYOUTS, STYLES
    from app.report.style import PAGES

    f = sub.add_parser("figure", help="draw a report figure (PNG, PDF, SVG) or an event animation (MP4, GIF)")
    f.add_argument("fields", nargs="*", help="NetCDF field files (needed for maps and animations)")
    f.add_argument("--region", help="GeoJSON (.geojson/.json) or shapefile (.shp/.zip)")
    f.add_argument("--bbox", help="box W,S,E,N in degrees (W > E crosses the antimeridian)")
    f.add_argument("--feature", help="which feature of a multi-feature file (a property value or an index)")
    f.add_argument("--budget", metavar="FILE.nc", help="draw from a budget written earlier (fluxfence run ... --netcdf) instead of recomputing")
    f.add_argument("--layout", choices=LAYOUTS, default="report", help="what to draw (default: report, all on one page)")
    f.add_argument("--out", help="figure file; .png, .pdf or .svg")
    f.add_argument("--dpi", type=int, default=150, help="resolution of a PNG (default 150)")
    f.add_argument("--style", choices=list(STYLES), default="paper", help="fonts and line widths for a paper or a slide")
    f.add_argument("--page", choices=list(PAGES), default="a4", help="page size of the report layout")
    f.add_argument("--convergence", action="store_true", help="map layout: add a convergence map beside the IVT map")
    f.add_argument("--discharge", metavar="FILE.csv", help="river discharge for the climatology: columns time, discharge_m3_s")
    f.add_argument("--start", help="first time (ISO 8601, UTC)")
    f.add_argument("--end", help="last time (ISO 8601, UTC)")
    f.add_argument("--animate", metavar="EVENT.mp4", help="also write an animation of the time window (.mp4 or .gif)")
    f.add_argument("--fps", type=float, default=4.0, help="animation frames (time steps) per second (default 4)")
    f.add_argument("--overwrite", action="store_true", help="replace existing output files")
    f.set_defaults(func=cmd_figure)


__all__ = ["add_parser", "cmd_figure", "figure_data", "mean_snapshot",
           "read_budget", "read_discharge", "snapshots"]
