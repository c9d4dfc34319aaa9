"""The command line's side of "never a lost file": resume folders, signals and messages.

The transaction itself (planning, checks, atomic staging and commit) is budget.outputs; this
module chooses the resume folder (`--resume-dir`, `--restart`), turns SIGTERM into the same
clean stop as Ctrl-C, and words what happened to the computed steps when a run stops.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import sys
import time
from contextlib import contextmanager
from pathlib import Path

from budget.errors import RequestError, ResumeMismatch
from budget.outputs import Outputs

#: Exit status after a stop by signal: the shell's 128 + signal number.
EXIT_INTERRUPTED = 130
EXIT_TERMINATED = 143

_received: list[int] = []


def inputs_of(args) -> list:
    """Every input path of a run (fields, globs, the region and gauge files): never an output."""
    return [*args.fields, getattr(args, "region", None), getattr(args, "discharge", None)]


def default_resume(out: Path) -> Path:
    """Where finished time blocks wait until the run's outputs are written."""
    return out.with_name(out.name + ".partial")


def _is_resume_folder(path: Path) -> bool:
    man = path / "manifest.json"
    try:
        return path.is_dir() and "format" in json.loads(man.read_text())
    except (OSError, ValueError, TypeError):
        return False


def resume_folder(args, default: Path, plan: Outputs) -> Path:
    """The resume folder of a run: --resume-dir or `default`; --restart empties it first."""
    folder = Path(args.resume_dir) if getattr(args, "resume_dir", None) else default
    hit = plan.input_hit(folder)
    if hit is not None:
        raise RequestError(f"The resume folder {str(folder)!r} is one of the inputs ({str(hit)!r}); "
                           "give another --resume-dir.")
    if folder.exists() and not folder.is_dir():
        raise RequestError(f"The resume folder {str(folder)!r} is a file; give another --resume-dir.")
    if getattr(args, "restart", False) and folder.exists():
        if not _is_resume_folder(folder) and any(folder.iterdir()):
            raise RequestError(f"{str(folder)!r} does not look like a resume folder (no manifest.json), so "
                               "--restart leaves it alone; give another --resume-dir.")
        shutil.rmtree(folder)
    return folder


def discard(folder: Path) -> None:
    """Remove a resume folder once every output is in place."""
    if _is_resume_folder(folder):
        shutil.rmtree(folder, ignore_errors=True)


def mismatch_message(exc: ResumeMismatch) -> str:
    import re

    version = re.search(r"another version of Fluxfence \(([^)]*)\)", str(exc))
    if version:  # an older (or newer) BlockSums format: never misread, say so
        return (f"The resume folder {str(exc.path)!r} holds finished steps written by another version of "
                f"Fluxfence ({version.group(1)}); pass --restart to discard them, or --resume-dir DIR to "
                "keep them and run in another folder.")
    return (f"The resume folder {str(exc.path)!r} holds finished steps of a different run (other fields, "
            "region, time window or options); pass --restart to discard them, or --resume-dir DIR to keep "
            "them and resume this run in another folder.")


def _on_term(signum, frame):
    _received.append(signum)
    raise KeyboardInterrupt


@contextmanager
def sigterm_as_interrupt():
    """SIGTERM stops the run like Ctrl-C: temporaries are removed, computed steps kept."""
    try:
        old = signal.signal(signal.SIGTERM, _on_term)
    except ValueError:  # not the main thread (the command line always is)
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def stop_status() -> int:
    """The exit status for a stop by signal: 143 after SIGTERM, 130 after Ctrl-C."""
    return EXIT_TERMINATED if signal.SIGTERM in _received else EXIT_INTERRUPTED


class WriteInterrupted(KeyboardInterrupt):
    """Stopped after the computation, while the outputs were written: nothing landed."""

    def __init__(self, kept: Path | None):
        self.kept = kept
        super().__init__(self.message())

    def message(self) -> str:
        text = "interrupted while writing the outputs; no output was written"
        if self.kept is not None and self.kept.is_dir():
            text += f"; the computed steps are kept in {self.kept}: run the same command again to write them"
        return text + "."


def hold(point: str) -> None:
    """A pause at a named point of a run, for the signal tests only (FLUXFENCE_HOLD=point).

    Real signals need a window at a known place (after the computation, between two outputs);
    this waits there at most 60 s and says so on stderr. Unset, it does nothing.
    """
    if os.environ.get("FLUXFENCE_HOLD") != point:
        return
    print(f"[test hook] holding at {point}", file=sys.stderr, flush=True)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        time.sleep(0.05)
