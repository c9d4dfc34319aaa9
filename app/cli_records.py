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


def write_tables(args, ds, paths: dict) -> list[Path]:
    """Compute and write the long-record tables of budget ``ds``; print a short summary."""
    from budget.export import write_frame
    from budget.periods import INTEGRATION_RULE, aggregate, climatology

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
