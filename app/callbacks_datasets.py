"""Datasets side by side in the dashboard: the selected region budgeted on several field sets.

The page chooses field sets by id from the server's list (app/server.py resolve_sources; never
a path).  Each is budgeted for the region on its own grid, levels and time steps through the
same jobs and cache as the main budget (app/callbacks.py ``start_budget``, key
``state.budget_key``), then budget.compare.stack puts them on the time stamps they share and
app/figures_attribution.datasets_figure overlays them with the spread shaded.  A field set that
cannot cover the region (its job fails) is named in a sentence; the others are still drawn.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from dash import Input, Output, callback
from dash.exceptions import MissingCallbackContextException

from budget.errors import FluxfenceError

from . import figures_attribution as fa
from .figures import empty_figure
from .jobs import CANCELLED, DONE, FAILED
from .messages import problem

WAIT_SECONDS = 0.8  # a short job is drawn in the same round trip
#: the display unit of each series the page offers (converted by budget.terms / budget.units)
SERIES = {"p_minus_e": "mm/day", "precipitable_water": "mm", "vapour_import": "kg/s"}


@dataclass
class Gathered:
    """The budgets of the chosen field sets: finished ones by label, the rest named."""

    budgets: dict = field(default_factory=dict)
    pending: list = field(default_factory=list)  # labels still computing
    failed: list = field(default_factory=list)  # (label, sentence)


def _polled() -> bool:
    from dash import ctx

    try:
        return ctx.triggered_id == "insight-datasets-poll"
    except MissingCallbackContextException:
        return False


def gather(state, want: dict, chosen, wait: float = WAIT_SECONDS) -> Gathered:
    """Find or start the region's budget on every chosen field set (by id)."""
    from .callbacks import start_budget

    out = Gathered()
    jobs = []
    for sid in chosen:
        try:
            label = state.source(sid).label
            one = dict(want, source=str(sid))
            key = state.budget_key(sid, want["geojson"], want["method"], want["correction"],
                                   want.get("attribution"))
        except (FluxfenceError, KeyError, TypeError) as exc:
            out.failed.append((str(sid), problem(exc, "choosing the field set")))
            continue
        ds = state.results.get(key)
        if ds is not None:
            out.budgets[label] = ds
            continue
        job = state.jobs.get(key) or start_budget(state, one, key)
        jobs.append((label, key, job))
    for label, key, job in jobs:
        if job.pending and wait:
            job.wait(wait)
        ds = state.results.get(key) if job.status == DONE else None
        if ds is not None:
            out.budgets[label] = ds
        elif job.status == FAILED:
            out.failed.append((label, job.message))
        elif job.status == CANCELLED:
            out.failed.append((label, "its budget was cancelled; choose the field set again."))
        else:
            out.pending.append(label)
    return out


def status_text(got: Gathered, name: str) -> str:
    parts = [f"“{label}” cannot give the budget of {name}: {msg}" for label, msg in got.failed]
    if got.pending:
        parts.append(f"Computing {name} on " + ", ".join(f"“{p}”" for p in got.pending) + "…")
    return " ".join(parts)


def overlay(got: Gathered, variable: str, name: str):
    """The overlay figure of the finished budgets, or a figure saying what is missing."""
    from budget.compare import stack

    if len(got.budgets) < 2:
        more = "" if got.pending else " Choose two or more field sets that cover the region."
        return empty_figure(f"{len(got.budgets)} of the chosen field sets ready for {name}.{more}")
    variable = variable if variable in SERIES else "p_minus_e"
    stacked = stack(got.budgets)  # a RequestError when they share no time step
    fig = fa.datasets_figure(stacked, variable, SERIES[variable])
    fig.update_layout(title_text=f"{fig.layout.title.text} — {name}")
    return fig


@callback(
    Output("insight-datasets-graph", "figure"),
    Output("insight-datasets-message", "children"),
    Output("insight-datasets-message", "className"),
    Output("insight-datasets-poll", "disabled"),
    Output("insight-datasets-title", "children"),
    Input("insight-datasets", "value"),
    Input("insight-datasets-variable", "value"),
    Input("want", "data"),
    Input("insight-datasets-poll", "n_intervals"),
)
def show_datasets(chosen, variable, want, _tick):
    title = "Datasets side by side"
    if not want:
        return empty_figure("Draw a region on the map, then choose field sets to compare."), "", "notice", True, title
    if not want.get("key"):  # the request itself was refused (app/callbacks.py request_budget)
        return empty_figure("No comparison."), want.get("problem", ""), "notice error", True, title
    name = want.get("name") or "the region"
    title = f"{title} — {name}"
    chosen = [str(c) for c in (chosen or [])]
    if len(chosen) < 2:
        return empty_figure(f"Choose two or more field sets to compare {name}."), "", "notice", True, title
    from .state import current

    try:
        got = gather(current(), want, chosen, wait=0 if _polled() else WAIT_SECONDS)
        fig = overlay(got, variable, name)
    except Exception as exc:  # noqa: BLE001 - one sentence on the page, the details in the log
        return empty_figure(f"No comparison for {name}."), problem(exc, "comparing the field sets"), \
            "notice error", True, title
    text = status_text(got, name)
    return fig, text, "notice error" if got.failed else "notice", not got.pending, title
