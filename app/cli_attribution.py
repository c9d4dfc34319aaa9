"""`fluxfence run` options for where the water comes from: layers, atmospheric rivers, events,
recycling, and datasets side by side.

The logic lives in budget.layers, budget.attribution, budget.events, budget.recycling and
budget.compare; this module adds the options, plans the extra outputs before anything is
computed, and writes the tables.
"""

from __future__ import annotations

import glob
import sys
from pathlib import Path

from budget.errors import RequestError


def add_options(r) -> None:
    g = r.add_argument_group("where the water comes from")
    g.add_argument("--layers", metavar="BOUNDS",
                   help="import and convergence of each layer between these bounds, in hPa (1000,850,700,500,300,100) or sigma (sigma:1,0.8,0.5,0); one CSV column per layer")
    g.add_argument("--ar-threshold", type=float, default=None, metavar="IVT",
                   help="IVT in kg m-1 s-1 above which inflow counts as atmospheric-river inflow (default 250, Rutz et al. 2014)")
    g.add_argument("--events", metavar="FILE.csv",
                   help="also write the event catalogue: runs of P - E above a percentile of the record")
    g.add_argument("--event-percentile", type=float, default=95.0, metavar="P", help="events exceed this percentile of the record's P - E (default 95)")
    g.add_argument("--event-gap", type=float, default=24.0, metavar="HOURS", help="join events closer than this (default 24 h)")
    g.add_argument("--dataset", action="append", metavar="NAME=FILES",
                   help="budget the region on several field sets (a glob or comma-separated files each) and write one long CSV with a dataset column; give it twice or more")


def attribution_options(args):
    """AttributionOptions from the command line."""
    from budget.attribution import AR_IVT_THRESHOLD, AttributionOptions
    from budget.layers import parse_layers

    thr = AR_IVT_THRESHOLD if args.ar_threshold is None else float(args.ar_threshold)
    if not thr > 0:
        raise RequestError(f"--ar-threshold must be a positive IVT in kg m-1 s-1, not {args.ar_threshold}; the common choice is 250.")
    return AttributionOptions(layers=parse_layers(args.layers) if args.layers else None, ar_threshold=thr)


def budget_options(args, closure):
    """BudgetOptions of one run: method, window, closure and attribution options."""
    from budget.options import BudgetOptions

    return BudgetOptions(method=args.method, closure=closure, attribution=attribution_options(args))


def refuse_with_many(args) -> None:
    """Events of many regions go into one catalogue with a ``region`` column; one file per
    region (--each-feature) has no such single table. Layers and the AR threshold reach
    many-region runs through budget_options (budget.multi.compute_many)."""
    if args.events and args.each_feature:
        raise RequestError("--events writes one catalogue with a region column; leave out --each-feature, "
                           "or pick one region with --feature.")


def event_rule(args):
    from budget.events import EventRule

    return EventRule(percentile=args.event_percentile, join_gap_hours=args.event_gap)


def targets(args, plan) -> dict:
    """The extra outputs, planned in the run's output transaction (budget.outputs.Outputs)
    before anything is computed: a bad rule, an input, an existing file without --overwrite, a
    folder or a name not ending in .csv are refused now."""
    paths = {}
    if args.events:
        event_rule(args)  # a bad rule is refused before computing
        paths["events"] = plan.file(args.events, "--events", (".csv",))
    return paths


def write_tables(args, ds, paths: dict, write) -> None:
    """Stage the extra tables of budget ``ds`` (one region, or a ``region`` dimension from
    budget.multi) through ``write(df, path)``, the run's output transaction; print a short
    note."""
    from budget.events import find_events_by_region

    if "events" in paths:
        ev = find_events_by_region(ds, event_rule(args))
        write(ev, paths["events"])
        if not args.quiet:
            level = ev.attrs["threshold_mm_day"]
            level = f"{level:.3g} mm/day" if not isinstance(level, dict) else "each region's own"
            print(f"{len(ev)} events above the {args.event_percentile:g}th percentile of P - E ({level})")


def summary_lines(ds) -> list[str]:
    """Period figures for the run summary: AR share, recycling ratio where E is known."""
    from budget.attribution import ar_share
    from budget.events import step_seconds
    from budget.recycling import period_ratio

    lines = []
    dt = step_seconds(ds["time"].values)
    if "ar_inflow" in ds:
        share = ar_share(ds, dt)
        thr = ds["ar_inflow"].attrs.get("ar_ivt_threshold", "")
        lines.append(f"  {'atmospheric-river share of the inflow':<44}{100 * share:>10.1f} %  (IVT >= {thr})")
    if "evaporation" in ds or "precipitation" in ds:
        rec = period_ratio(ds, dt)
        lines.append(f"  {'bulk recycling ratio':<44}{rec['recycling_ratio']:>10.3f}    ({rec['evaporation_source']}; Brubaker et al. 1993)")
    return lines


# -- datasets side by side ------------------------------------------------------------------

def dataset_specs(items) -> dict[str, list[str]]:
    """{name: [files]} from repeated --dataset NAME=FILES (glob or comma-separated)."""
    specs: dict[str, list[str]] = {}
    for item in items or []:
        name, sep, pattern = item.partition("=")
        name = name.strip()
        if not sep or not name or not pattern.strip():
            raise RequestError(f"--dataset expects NAME=FILES (for example era=era5_*.nc), got {item!r}.")
        if name in specs:
            raise RequestError(f"The dataset name {name!r} is given twice; give each --dataset its own name.")
        files = []
        for part in pattern.split(","):
            hits = sorted(glob.glob(part.strip()))
            if not hits and not Path(part.strip()).exists():
                raise RequestError(f"--dataset {name}: no file matches {part.strip()!r}; check the path or the glob.")
            files.extend(hits or [part.strip()])
        specs[name] = files
    if len(specs) < 2:
        raise RequestError("A comparison needs at least two field sets: give --dataset NAME=FILES twice or more.")
    return specs


def long_frame(stacked, budgets: dict):
    """One long table: time, dataset, the usual columns; then per time step the rows
    ``range_min`` and ``range_max`` (the spread across datasets, column by column)."""
    import pandas as pd

    from budget.export import to_frame

    parts = []
    for name, b in budgets.items():
        df = to_frame(b.sel(time=stacked["time"].values))
        df.insert(1, "dataset", name)
        parts.append(df)
    long = pd.concat(parts, ignore_index=True)
    num = [c for c in long.columns if c not in ("time", "dataset")]
    grouped = long.groupby("time", sort=True)[num]
    lo = grouped.min().reset_index()
    hi = grouped.max().reset_index()
    lo.insert(1, "dataset", "range_min")
    hi.insert(1, "dataset", "range_max")
    return pd.concat([long, lo, hi], ignore_index=True).sort_values(["time", "dataset"], kind="stable").reset_index(drop=True)


def run_datasets(args, open_fields, closure, progress, caution) -> int:
    """`fluxfence run --dataset A=... --dataset B=... --region R --out long.csv`.

    The output goes through the run's transaction (budget.outputs.Outputs): planned and checked
    before any field set is opened, staged when every budget is in, committed at the end."""
    from budget.compare import stack
    from budget.export import frame_csv_text
    from budget.ledger import compute
    from budget.options import RunOptions
    from budget.outputs import Outputs
    from budget.region import load_region

    if args.fields:
        raise RequestError("With --dataset, give the field files inside each --dataset NAME=FILES, not as plain arguments.")
    if args.each_feature or args.netcdf or args.events or getattr(args, "aggregate", None):
        raise RequestError("--dataset writes one long CSV for one region; leave out --each-feature, --netcdf, --events and --aggregate.")
    specs = dataset_specs(args.dataset)
    plan = Outputs(inputs=[f for files in specs.values() for f in files] + [args.region], overwrite=args.overwrite)
    out = plan.file(args.out, "--out", (".csv",))
    region = load_region(path=args.region, bbox=args.bbox, feature=args.feature, great_circle=args.great_circle)
    options = budget_options(args, closure)
    with plan:  # the temporary is removed on any exit without a commit
        budgets = {}
        for name, files in specs.items():
            fields = open_fields(args, files)
            if not args.quiet:
                print(f"dataset {name}: {len(files)} file(s)", file=sys.stderr)
            budgets[name] = compute(fields, region, options=options, run=RunOptions(progress=progress, scheduler=args.scheduler))
        stacked = stack(budgets)
        plan.stage(out, frame_csv_text(long_frame(stacked, budgets)))
        plan.commit()
    if not args.quiet:
        pme = stacked["p_minus_e"].mean("time") * 86400.0
        for name in stacked["dataset"].values:
            print(f"  {str(name):<24}mean P - E {float(pme.sel(dataset=name)):>10.3f} mm/day")
        print(f"  {'spread (max - min)':<24}           {float(pme.max() - pme.min()):>10.3f} mm/day "
              f"over {stacked.sizes['time']} common time steps")
        print(f"wrote {out}")
        print(caution)
    return 0
