"""Command line: `fluxfence run | serve | sample | figure` (figure: app/figure_cmd.py).

Every user-facing problem ends in one sentence on stderr and a non-zero exit status; a
traceback means a bug.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from app import cli_attribution, cli_records, runfiles
from budget import __version__
from budget.catalogue import var_help
from budget.errors import FluxfenceError, RequestError
from budget.options import ClosureOptions, RunOptions

CAUTION = (
    "Caution: reanalysis budgets are estimates with known imbalances; they are not a substitute "
    "for gauge records or official forecasts. Defer to local agencies and licensed practice."
)


def _pairs(items, flag):
    out = {}
    for item in items or []:
        if "=" not in item:
            raise RequestError(f"{flag} expects role=name (for example {flag} q=hus), got {item!r}.")
        k, v = item.split("=", 1)
        out[k.strip()] = v.strip()
    return out


class _Progress:
    """A one-line progress bar on stderr for runs longer than a moment."""

    def __init__(self, enabled: bool):
        self.enabled = enabled and sys.stderr.isatty()
        self.t0 = time.monotonic()
        self.base = None  # steps already done at the first call (resumed from a .partial folder)

    def __call__(self, done, total):
        if not self.enabled:
            return
        if self.base is None:
            self.base, self.t0 = done, time.monotonic()
        el = time.monotonic() - self.t0
        rate = (done - self.base) / el if el > 0 else 0.0
        left = f"{(total - done) / rate:.0f} s left" if rate > 0 else "starting"
        n = int(30 * done / max(total, 1))
        sys.stderr.write(f"\r[{'#' * n}{'.' * (30 - n)}] {done}/{total} steps  {rate:.1f}/s  {left} ")
        sys.stderr.flush()
        if done >= total:
            sys.stderr.write("\n")


def _closure_options(args) -> dict:
    """compute() keywords for closing the budget (budget.closure)."""
    return {
        "mass_correction": False if args.no_mass_correction else None,
        "accumulation_period": args.accumulation_period,
        "accumulation_reset": args.accumulation_reset,
        "evaporation_positive": args.evaporation_positive,
    }


def _summary(ds) -> str:
    from budget import terms
    from budget.export import to_frame

    df = to_frame(ds)
    t = ds["time"].values
    rows = [
        ("region", ds.attrs.get("region_name", "region")),
        ("area", f"{ds.attrs['region_area_m2'] / 1e6:,.0f} km²"),
        ("period", f"{str(t[0])[:16]} .. {str(t[-1])[:16]} UTC ({t.size} steps)"),
        ("method", ds.attrs.get("method", "")),
        ("mass correction", ds.attrs.get("mass_correction", "")),
    ]
    import json

    flagged = json.loads(ds.attrs.get("flagged_values") or "{}")
    if flagged:  # values accepted but counted (budget.plausible)
        rows.append(("flagged values", ", ".join(f"{k}: {n}" for k, n in flagged.items())))
    lines = [f"{k:<22}{v}" for k, v in rows]
    lines.append("mean over the period")
    for col, term in terms.summary_columns():
        if col.name in df:
            label = term.label[0].lower() + term.label[1:] if term.label[1:2].islower() else term.label
            lines.append(f"  {label:<40}{df[col.name].mean():>14.4g} {terms.unit_label(col.unit)}")
    return "\n".join(lines)


def cmd_run(args) -> int:
    from budget.export import NETCDF_SUFFIXES, SUFFIXES
    from budget.outputs import Outputs

    if not args.region and not args.bbox:
        raise RequestError("Say which region: --region FILE (GeoJSON or shapefile) or --bbox W,S,E,N.")
    if args.region and args.bbox:
        raise RequestError("Give either --region or --bbox, not both.")
    if args.dataset:  # the same region on several field sets, side by side
        return cli_attribution.run_datasets(args, _open_fields, ClosureOptions(**_closure_options(args)),
                                            _Progress(not args.quiet), CAUTION)
    if not args.fields:
        raise RequestError("Give the field files to read (NetCDF, GRIB, Zarr or globs), or --dataset NAME=FILES twice or more.")
    if args.each_feature or cli_records.is_many(args):  # every feature of --region in one pass
        cli_attribution.refuse_with_many(args)
        return cli_records.run_many(args, lambda: _open_fields(args), ClosureOptions(**_closure_options(args)),
                                    _Progress(not args.quiet), CAUTION)
    # every output is planned and checked before anything is computed (budget.outputs)
    plan = Outputs(inputs=runfiles.inputs_of(args), overwrite=args.overwrite)
    out = plan.file(args.out, "--out", SUFFIXES)
    nc = plan.file(args.netcdf, "--netcdf", NETCDF_SUFFIXES) if args.netcdf else None
    tables = cli_records.targets(args, out) if cli_records.wanted(args) else {}
    for path in tables.values():
        if path != out:
            plan.file(path, "--out")
    extra = cli_attribution.targets(args, plan)
    partial = runfiles.resume_folder(args, runfiles.default_resume(out), plan)
    files = ([] if "periods" in tables else [out]) + ([nc] if nc else [])  # --aggregate puts the period table in --out
    ds, fields, region = _compute_and_write(args, plan, partial, files, tables, extra)
    if not args.quiet:
        print(_summary(ds))
        print("\n".join(cli_attribution.summary_lines(ds)))
    if args.eddies:
        from budget.eddies import decompose

        split = decompose(fields, region)
        conv = split["vapour_convergence"].values * 86400
        print("period-mean convergence from the files' winds (no mass correction)")
        for label, value in zip(("total", "mean flow", "transient eddies"), conv):
            print(f"  {label:<20}{value:>14.4g} mm/day")
    if not args.quiet:
        print(f"wrote {out}" + (f" and {nc}" if nc else ""))
        print(CAUTION)
    return 0


def _compute_and_write(args, plan, partial, targets, tables, extra):
    """One budget, its outputs staged and committed together; the resume folder goes last."""
    import json

    from budget.export import encode, frame_csv_text
    from budget.fields import open_fields
    from budget.region import load_region

    region = load_region(path=args.region, bbox=args.bbox, feature=args.feature, great_circle=args.great_circle)
    fields = open_fields(args.fields, var_map=_pairs(args.var, "--var"), units=_pairs(args.units, "--units"), start=args.start, end=args.end, rh_reference=args.rh_reference)
    for w in list(fields.warnings) + list(region.warnings):
        print(f"warning: {w}", file=sys.stderr)
    with plan:
        ds = _compute(args, fields, region, partial)
        for w in json.loads(ds.attrs.get("warnings", "[]")):
            if w not in fields.warnings:
                print(f"warning: {w}", file=sys.stderr)
        try:
            runfiles.hold("computed")
            for k, target in enumerate(targets):
                if k:
                    runfiles.hold("staged")
                plan.stage(target, encode(ds, target))
            stage_table = lambda df, path: plan.stage(path, frame_csv_text(df))  # noqa: E731
            cli_records.write_tables(args, ds, tables, write=stage_table)
            cli_attribution.write_tables(args, ds, extra, write=stage_table)
            plan.commit()
        except KeyboardInterrupt:
            raise runfiles.WriteInterrupted(partial) from None
    runfiles.discard(partial)
    return ds, fields, region


def _compute(args, fields, region, partial):
    """compute() keeping the resume folder (removed once the outputs are in place)."""
    from budget.errors import ResumeMismatch
    from budget.ledger import compute

    try:
        return compute(fields, region, options=cli_attribution.budget_options(args, ClosureOptions(**_closure_options(args))),
                       run=RunOptions(progress=_Progress(not args.quiet), scheduler=args.scheduler, resume=partial,
                                      keep_resume=True))
    except ResumeMismatch as exc:
        raise RequestError(runfiles.mismatch_message(exc)) from None


def _open_fields(args, files=None):
    from budget.fields import open_fields

    return open_fields(files if files is not None else args.fields, var_map=_pairs(args.var, "--var"), units=_pairs(args.units, "--units"), start=args.start, end=args.end, rh_reference=args.rh_reference)


def cmd_sample(args) -> int:
    from budget.outputs import Outputs
    from sample_fields import ensure_sample

    out = Path(args.out)
    plan = Outputs(overwrite=args.overwrite)
    plan.folder(out, "--out")
    paths = ensure_sample()
    sources = (paths.levels, paths.column, paths.basin)
    written = [plan.file(out / Path(p).name, "--out") for p in sources]
    with plan:
        plan.make_folders()
        for p, target in zip(sources, written):
            plan.stage(target, Path(p).read_bytes())
        plan.commit()
    print("Invented demonstration scenario (not real weather):")
    for t in written:
        print(f"  {t}")
    print(f"try: fluxfence run {written[0]} --region {written[2]} --out basin.csv")
    return 0


def cmd_serve(args) -> int:
    from app.server import serve

    serve(paths=args.fields or None, data_dir=args.data_dir, host=args.host, port=args.port,
          workers=args.workers, job_threads=args.job_threads, pool_workers=args.pool_workers)
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="fluxfence", description="Regional water-vapour budgets from gridded fields.")
    p.add_argument("--version", action="version", version=f"fluxfence {__version__}")
    sub = p.add_subparsers(dest="command", required=True)

    r = sub.add_parser("run", help="compute the budget of a region and write CSV or NetCDF")
    r.add_argument("fields", nargs="*", help="NetCDF or GRIB files, globs or a Zarr store (or --dataset NAME=FILES)")
    r.add_argument("--region", help="GeoJSON (.geojson/.json) or shapefile (.shp/.zip)")
    r.add_argument("--bbox", help="box W,S,E,N in degrees, e.g. --bbox -100,30,-80,45 (W > E crosses the antimeridian)")
    r.add_argument("--feature", help="which feature of a multi-feature file (a property value or an index)")
    r.add_argument("--eddies", action="store_true", help="also split the period-mean import into mean-flow and transient-eddy parts (level inputs)")
    r.add_argument("--each-feature", action="store_true", help="one budget per feature of --region; --out is then a folder")
    r.add_argument("--great-circle", action="store_true", help="join vertices by great circles, not lon-lat straight lines")
    r.add_argument("--start", help="first time (ISO 8601, UTC)")
    r.add_argument("--end", help="last time (ISO 8601, UTC)")
    r.add_argument("--var", action="append", metavar="ROLE=NAME", help=var_help())
    r.add_argument("--rh-reference", choices=["water", "ice", "mixed"], default=None,
                   help="what relative humidity is relative to when q is derived from it: water (default unless the "
                        "file says ice), ice below 0 degC, or mixed (the ECMWF IFS blend, as ERA5's r is defined)")
    r.add_argument("--units", action="append", metavar="VAR=UNIT", help="units for a variable whose attribute is missing or wrong (e.g. q=g/kg, ua=knots, level=hPa)")
    r.add_argument("--method", choices=["boundary", "area"], default="boundary", help="primary convergence estimate (both are reported)")
    r.add_argument("--out", required=True, help="output file, .csv or .nc")
    r.add_argument("--netcdf", help="also write the full budget as NetCDF here")
    r.add_argument("--overwrite", action="store_true", help="replace an existing output file (never an input)")
    r.add_argument("--resume-dir", metavar="DIR", help="keep finished time steps here until the outputs are written (default: OUT.partial beside --out)")
    r.add_argument("--restart", action="store_true", help="discard finished steps left in the resume folder by an earlier run")
    r.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    r.add_argument("--scheduler", metavar="tcp://HOST:PORT", help="run on this dask.distributed cluster (default: local threads)")
    r.add_argument("--no-mass-correction", action="store_true", help="do not apply the barotropic dry-air mass correction (on by default for level inputs; its effect is still reported)")
    r.add_argument("--accumulation-period", metavar="DURATION", help="accumulated precipitation/evaporation restart every DURATION (1h: each value covers the step before it; 12h; none: never)")
    r.add_argument("--accumulation-reset", metavar="HH:MM", help="a time of day (UTC) when accumulations restart (default 00:00)")
    r.add_argument("--evaporation-positive", choices=["up", "down"], help="sign of evaporation in the files when their metadata do not say (ECMWF: down)")
    cli_records.add_options(r)
    cli_attribution.add_options(r)
    cli_records.add_region_options(r)
    r.set_defaults(func=cmd_run)

    s = sub.add_parser("serve", help="start the dashboard (the invented sample event when no fields are given)")
    s.add_argument("fields", nargs="*")
    s.add_argument("--data-dir", help="folder the dashboard may read fields from")
    s.add_argument("--host", default="127.0.0.1")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--workers", type=int, default=8, help="request threads of the web server (default 8)")
    s.add_argument("--job-threads", type=int, default=2, help="budgets computed at once (default 2)")
    s.add_argument("--pool-workers", type=int, default=1, help="worker processes for records over 2000 time steps (default 1)")
    s.set_defaults(func=cmd_serve)

    m = sub.add_parser("sample", help="write the invented demo event and basin outline")
    m.add_argument("--out", default="demo", help="folder to write into")
    m.add_argument("--overwrite", action="store_true")
    m.set_defaults(func=cmd_sample)

    from app.figure_cmd import add_parser as add_figure_parser

    add_figure_parser(sub)
    return p


#: Options whose value may start with a minus (a longitude west of Greenwich).
_SIGNED_VALUE_OPTIONS = ("--bbox",)


def _join_signed_values(argv: list[str]) -> list[str]:
    """'--bbox -100,30,-80,45' as users type it: argparse would read the value as an option
    (it only takes plain numbers like -100 as values), so join it to '--bbox=-100,30,-80,45'."""
    import re

    out, i = [], 0
    while i < len(argv):
        tok = argv[i]
        if tok == "--":
            return out + argv[i:]
        nxt = argv[i + 1] if i + 1 < len(argv) else ""
        if tok in _SIGNED_VALUE_OPTIONS and re.match(r"-[0-9.]", nxt):
            out.append(f"{tok}={nxt}")
            i += 2
            continue
        out.append(tok)
        i += 1
    return out


def main(argv=None) -> int:
    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    args = parser.parse_args(_join_signed_values([str(a) for a in argv]))
    try:
        if args.command == "serve":  # the server handles its own signals
            return args.func(args)
        with runfiles.sigterm_as_interrupt():
            return args.func(args)
    except FluxfenceError as exc:
        print(f"fluxfence: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt as exc:
        msg = exc.message() if hasattr(exc, "message") else "interrupted; no output was written."
        print(f"fluxfence: {msg}", file=sys.stderr)
        return runfiles.stop_status()
    except Exception as exc:  # a bug, not a user error: say so in one line
        if os.environ.get("FLUXFENCE_DEBUG"):
            raise
        print(
            f"fluxfence: internal error ({type(exc).__name__}: {exc}); please report it with the command you ran "
            "(set FLUXFENCE_DEBUG=1 to see the traceback).",
            file=sys.stderr,
        )
        return 70


if __name__ == "__main__":
    sys.exit(main())
