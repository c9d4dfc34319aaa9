"""`fluxfence run` options for long records: period sums, climatology, river discharge.

The logic lives in budget.periods and budget.discharge; this module only adds the options,
checks the output paths before anything is computed, and writes the tables.
"""

from __future__ import annotations

import sys
from pathlib import Path

from budget.errors import RequestError


def add_options(r) -> None:
    """The long-record options of `fluxfence run`."""
    from budget.periods import KINDS

    g = r.add_argument_group("long records")
    g.add_argument("--aggregate", choices=KINDS[1:], help="write one row per region and period to --out (a .csv) instead of one per time step")
    g.add_argument("--water-year-start", type=int, default=10, metavar="MONTH", help="month a water year starts in (default 10: 1 October, USGS practice)")
    g.add_argument("--min-coverage", type=float, default=0.9, metavar="FRACTION", help="periods with less data than this are flagged and not averaged (default 0.9)")
    g.add_argument("--climatology", nargs="?", const="all", metavar="START,END",
                   help="also write the mean annual cycle by month and water-year statistics to OUT.climatology.csv (years START..END, default all)")
    g.add_argument("--discharge", metavar="GAUGE.csv", help="compare long-term P - E with river discharge (m3/s) from this CSV by water year; writes OUT.discharge.csv")
    g.add_argument("--discharge-column", metavar="NAME", help="the discharge column of --discharge when it has several")


def wanted(args) -> bool:
    return bool(args.aggregate or args.climatology or args.discharge)


def _years(text: str | None):
    if text in (None, "all"):
        return None
    try:
        a, b = (int(x) for x in text.split(","))
    except ValueError:
        raise RequestError(f"--climatology expects two years START,END (for example 1991,2020), got {text!r}.") from None
    if a > b:
        raise RequestError(f"--climatology years run from START to END; {a} is after {b}.")
    return a, b


def targets(args, out: Path) -> dict:
    """Output paths of the long-record tables, checked before computing (no-overwrite rule)."""
    _years(args.climatology)
    paths = {}
    if args.aggregate:
        if out.suffix.lower() != ".csv":
            raise RequestError(f"--aggregate writes a table; end --out in .csv, not {str(out)!r} (use --netcdf for the per-step budget).")
        paths["periods"] = out
    stem = out.with_suffix("")
    if args.climatology:
        paths["climatology"] = stem.with_name(stem.name + ".climatology.csv")
    if args.discharge:
        src = Path(args.discharge)
        if not src.is_file():
            raise RequestError(f"The gauge file {str(src)!r} does not exist; give a CSV of time and discharge in m3/s.")
        paths["discharge"] = stem.with_name(stem.name + ".discharge.csv")
        if paths["discharge"].resolve() == src.resolve():
            raise RequestError(f"The discharge table would overwrite the gauge file {str(src)!r}; choose another --out.")
    for p in paths.values():
        if p != out and p.exists() and not args.overwrite:
            raise RequestError(f"{str(p)!r} exists already; choose another --out or pass --overwrite.")
    return paths


def write_tables(args, ds, paths: dict, write=None) -> list[Path]:
    """Compute and write the long-record tables of budget ``ds``; print a short summary.

    ``write(df, path)`` writes one table (default: budget.export.write_frame); the command line
    passes its output transaction's staging (budget.outputs), so the tables land with the rest.
    """
    from budget.export import write_frame
    from budget.periods import INTEGRATION_RULE, aggregate, climatology

    write_frame = write or write_frame
    written = []
    if "periods" in paths:
        df = aggregate(ds, args.aggregate, args.water_year_start, args.min_coverage)
        write_frame(df, paths["periods"])
        written.append(paths["periods"])
        flagged = int((~df["complete"]).sum())
        if not args.quiet:
            print(f"{len(df)} {args.aggregate} rows; {flagged} flagged (coverage below {args.min_coverage:g}, not averaged)")
    if "climatology" in paths:
        clim = climatology(ds, _years(args.climatology), args.water_year_start, args.min_coverage)
        write_frame(clim, paths["climatology"])
        written.append(paths["climatology"])
    if "discharge" in paths:
        from budget.discharge import compare, read_gauge, summary_text

        gauge = read_gauge(args.discharge, args.discharge_column)
        table = compare(ds, gauge, args.water_year_start, args.min_coverage)
        write_frame(table, paths["discharge"])
        written.append(paths["discharge"])
        if not args.quiet:
            print(summary_text(table))
    if written and not args.quiet:
        print(f"periods: {INTEGRATION_RULE}", file=sys.stderr)
    return written


# -- many regions in one pass ------------------------------------------------------------------
def add_region_options(r) -> None:
    """Options for region files with several features (budget.multi)."""
    g = r.add_argument_group("many regions")
    g.add_argument("--id-property", metavar="NAME", help="feature property holding each region's id (default: name, else id, else the feature's index)")
    g.add_argument("--skip-invalid", action="store_true", help="compute the valid features of --region and name the invalid ones instead of stopping")


def named_regions(args) -> tuple[list, list]:
    """(id, Region) for every feature of --region, and a label naming each in messages; invalid ones refused or, with --skip-invalid,
    reported on stderr and left out."""
    from budget.region import load_regions

    rs = load_regions(args.region, id_property=args.id_property, great_circle=args.great_circle)
    for w in rs.warnings:
        print(f"warning: {w}", file=sys.stderr)
    if not args.skip_invalid:
        rs.raise_if_invalid()
    for p in rs.problems:
        print(f"skipped feature '{p.id}': {p.message}", file=sys.stderr)
    if not rs.regions:
        raise RequestError(f"No feature of {rs.source} is a valid region; fix the file.")
    return [(r.id, r.region) for r in rs.regions], [f"Feature {r.index} ({r.id})" for r in rs.regions]


def is_many(args) -> bool:
    """True when --region holds several features and --feature does not pick one."""
    if not args.region or args.feature is not None:
        return False
    from budget.region import load_regions

    rs = load_regions(args.region, id_property=args.id_property, great_circle=args.great_circle)
    return len(rs.regions) + len(rs.problems) > 1


def _slug(name: str) -> str:
    import re

    return re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("_") or "region"


def _many_outputs(args, out: Path, ids: list) -> tuple[list, dict]:
    """The files of a many-region run (checked before computing) and its period tables."""
    if args.each_feature:
        if out.suffix.lower() in (".csv", ".nc"):
            raise RequestError(f"With --each-feature, --out names a folder, not a file like {str(out)!r}.")
        if wanted(args):
            raise RequestError("--aggregate and --climatology write one table for all regions; leave out --each-feature.")
        return [out / f"{k:03d}_{_slug(rid)}.csv" for k, rid in enumerate(ids)] + [out / "summary.csv"], {}
    if out.suffix.lower() not in (".csv", ".nc"):
        raise RequestError(f"Cannot tell the output format of {str(out)!r}; end the name in .csv (one long table) or .nc.")
    tables = targets(args, out) if wanted(args) else {}
    return [out] + list(tables.values()), tables


def run_many(args, open_fields, closure, progress, caution: str) -> int:
    """Every feature of --region from one pass over the fields.

    Without --each-feature: one long table (``time``, ``region``, columns) in --out (.csv), or
    the budgets with a ``region`` dimension (.nc); --aggregate and --climatology work per
    region. With --each-feature: --out is a folder of one CSV per region plus summary.csv.
    Finished time blocks wait in the resume folder (--resume-dir, default OUT.partial) until
    every output is in place, as for a single region (app/runfiles.py).
    """
    from app import cli_attribution, runfiles
    from budget import multi, terms
    from budget.errors import ResumeMismatch
    from budget.export import NETCDF_SUFFIXES
    from budget.outputs import Outputs

    if args.discharge:
        raise RequestError("--discharge compares one basin with its river; pick the basin with --feature.")
    out = Path(args.out)
    regions, labels = named_regions(args)
    ids = [rid for rid, _ in regions]
    files, tables = _many_outputs(args, out, ids)
    # every output planned and checked before computing, all committed together (budget.outputs)
    plan = Outputs(inputs=runfiles.inputs_of(args), overwrite=args.overwrite)
    if args.each_feature:
        plan.folder(out, "--out")
    for f in dict.fromkeys(files):  # --aggregate writes its table in --out itself
        plan.file(f, "--out")
    if args.netcdf:
        plan.file(args.netcdf, "--netcdf", NETCDF_SUFFIXES)
    extra = cli_attribution.targets(args, plan)  # --events: one catalogue with a region column
    partial = runfiles.resume_folder(args, runfiles.default_resume(out), plan)
    fields = open_fields()
    stencils = multi.compile_all(fields, regions, labels)  # every region checked before computing
    for w in fields.warnings:
        print(f"warning: {w}", file=sys.stderr)
    with plan:
        try:
            ds = multi.compute_many(fields, regions, progress=progress, scheduler=args.scheduler, stencils=stencils,
                                    options=cli_attribution.budget_options(args, closure), resume=partial, keep_resume=True)
        except ResumeMismatch as exc:
            raise RequestError(runfiles.mismatch_message(exc)) from None
        for w in multi.warnings_of(ds):
            print(f"warning: {w}", file=sys.stderr)
        summary = multi.summary_frame(ds)
        try:
            runfiles.hold("computed")
            _stage_many(args, plan, ds, out, files, tables, summary, extra)
            plan.commit()
        except KeyboardInterrupt:
            raise runfiles.WriteInterrupted(partial) from None
    runfiles.discard(partial)
    if not args.quiet:
        pme = f"mean_{terms.term('p_minus_e').columns[0].name}"
        print(summary[["region", "area_km2"] + [c for c in (pme,) if c in summary]].to_string(index=False))
        print(f"wrote {ds.sizes['region']} budgets in one pass: " + (f"{out}/ and summary.csv" if args.each_feature else str(out)))
        print(caution)
    return 0


def _stage_many(args, plan, ds, out: Path, files: list, tables: dict, summary, extra: dict) -> None:
    """Stage every output of a many-region run in the transaction ``plan``."""
    from app import cli_attribution
    from budget import multi
    from budget.export import encode, frame_csv_text

    if args.each_feature:
        plan.make_folders()
        for b, f in zip(multi.unstack(ds), files):
            plan.stage(f, encode(b, f))
        summary.insert(1, "file", [f.name for f in files[:-1]])
        plan.stage(files[-1], frame_csv_text(summary))
    elif "periods" not in tables:
        plan.stage(out, encode(ds, out) if out.suffix.lower() == ".nc" else frame_csv_text(multi.to_long_frame(ds)))
    if args.netcdf:  # every region with a region dimension, also beside --each-feature's folder
        plan.stage(args.netcdf, encode(ds, args.netcdf))
    if tables:
        write_tables(args, ds, tables, write=lambda df, path: plan.stage(path, frame_csv_text(df)))
    if extra:  # --events: one catalogue with a region column
        cli_attribution.write_tables(args, ds, extra, write=lambda df, path: plan.stage(path, frame_csv_text(df)))
