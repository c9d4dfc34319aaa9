"""Words for the page: one sentence per problem, dates, file-name slugs."""

from __future__ import annotations

import logging
import re

import pandas as pd

from budget.errors import FluxfenceError

log = logging.getLogger("fluxfence.app")


def problem(exc: BaseException, doing: str) -> str:
    """One sentence for the user; a traceback only in the server log."""
    if isinstance(exc, FluxfenceError):
        return str(exc)
    log.exception("unexpected problem while %s", doing)
    return (f"Something unexpected went wrong while {doing} ({type(exc).__name__}); "
            "the details are in the server log.")


def iso(t) -> str:
    return pd.Timestamp(t).strftime("%Y-%m-%d %H:%M UTC")


def slug(name: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "_", name or "region").strip("_").lower()
    return s[:60] or "region"
