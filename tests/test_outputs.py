"""budget.outputs: the atomic writer and the output transaction of a run.

References: POSIX open(2)/umask semantics (a new file's mode is 0666 & ~umask; the file a plain
open() creates in the same folder is the check), rename(2) and link(2) (an existing name is
replaced by rename, refused by link), errno's ENOSPC and EROFS for a full disk and a read-only
file system. Failures are injected by monkeypatching; the command-line tests (test_cli_files.py)
use real signals, real read-only folders and, where the machine allows it, a real full disk.
"""

import errno
import os
import stat
import subprocess
import sys
from pathlib import Path

import pytest

from budget import outputs
from budget.errors import RequestError
from budget.outputs import Outputs, atomic_write, clean_stale


def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def _leftovers(folder: Path) -> list:
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".tmp"))


@pytest.mark.parametrize("mask", [0o022, 0o027, 0o002])
def test_new_files_get_the_mode_open_would_give(tmp_path, mask):
    # POSIX: open(path, O_CREAT, 0666) creates mode 0666 & ~umask; atomic_write must match it
    # (0644 under umask 022), not mkstemp's private 0600
    old = os.umask(mask)
    try:
        ref = tmp_path / "plain.txt"
        ref.write_text("x")
        atomic_write(tmp_path / "out.csv", "a,b\n1,2\n")
        assert _mode(tmp_path / "out.csv") == _mode(ref) == 0o666 & ~mask
        assert outputs.file_mode() == 0o666 & ~mask
    finally:
        os.umask(old)


def test_atomic_write_replaces_or_refuses_and_leaves_no_temporary(tmp_path):
    t = tmp_path / "b.csv"
    atomic_write(t, "one\n")
    atomic_write(t, b"two\n")
    assert t.read_text() == "two\n"
    with pytest.raises(RequestError, match="exists already"):
        atomic_write(t, "three\n", overwrite=False)
    assert t.read_text() == "two\n"
    with pytest.raises(RequestError, match="does not exist"):
        atomic_write(tmp_path / "no" / "x.csv", "x")
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("code, word", [(errno.ENOSPC, "disk is full"), (errno.EROFS, "read-only")])
def test_a_failed_write_keeps_the_old_file_and_removes_the_temporary(tmp_path, monkeypatch, code, word):
    t = tmp_path / "keep.nc"
    t.write_bytes(b"old")

    def failing_fsync(fd):  # the disk fills (or turns read-only) while the data is flushed
        raise OSError(code, os.strerror(code))

    monkeypatch.setattr(outputs.os, "fsync", failing_fsync)
    with pytest.raises(RequestError, match=word) as info:
        atomic_write(t, b"new" * 1000)
    assert "\n" not in str(info.value)  # one sentence
    assert t.read_bytes() == b"old"
    assert _leftovers(tmp_path) == []


def test_plan_refuses_inputs_existing_files_folders_and_duplicates(tmp_path):
    data = tmp_path / "fields.nc"
    data.write_bytes(b"input")
    link = tmp_path / "alias.nc"
    link.symlink_to(data)
    store = tmp_path / "store.zarr"
    store.mkdir()
    (tmp_path / "old.csv").write_text("old")
    (tmp_path / "adir.csv").mkdir()
    plan = Outputs(inputs=[str(tmp_path / "f*.nc"), str(store)], overwrite=True)  # a glob, as the CLI takes
    for bad, word in [(data, "one of the inputs"), (link, "one of the inputs"), (store / "x.csv", "one of the inputs"),
                      (tmp_path / "adir.csv", "existing folder"), (tmp_path / "out.txt", "end the name in"),
                      (tmp_path / "none" / "x.csv", "does not exist")]:
        with pytest.raises(RequestError, match=word):
            plan.file(bad, "--out", (".csv", ".nc"))
    plan.file(tmp_path / "old.csv", "--out")  # overwrite allows an existing output...
    with pytest.raises(RequestError, match="both name"):
        plan.file(tmp_path / "old.csv", "--netcdf")  # ...but not twice
    with pytest.raises(RequestError, match="exists already"):
        Outputs(overwrite=False).file(tmp_path / "old.csv", "--out")
    assert data.read_bytes() == b"input" and (tmp_path / "old.csv").read_text() == "old"


def test_outputs_land_together_or_not_at_all(tmp_path):
    a, b = tmp_path / "a.csv", tmp_path / "new" / "b.csv"
    with pytest.raises(RuntimeError):
        with Outputs() as plan:
            plan.file(a)
            plan.folder(tmp_path / "new")
            plan.file(b)
            plan.make_folders()
            plan.stage(a, "a\n")
            raise RuntimeError("the second output failed")  # e.g. Ctrl-C between the two
    assert not a.exists() and not (tmp_path / "new").exists()  # the created folder went too
    assert _leftovers(tmp_path) == []
    with Outputs() as plan:
        plan.file(a)
        plan.folder(tmp_path / "new")
        plan.file(b)
        plan.make_folders()
        plan.stage(a, "a\n")
        plan.stage(b, "b\n")
        assert not a.exists()  # staged, not yet in place
        plan.commit()
    assert a.read_text() == "a\n" and b.read_text() == "b\n"
    assert _leftovers(tmp_path) == [] and _leftovers(tmp_path / "new") == []


def test_commit_never_clobbers_a_file_that_appeared_meanwhile(tmp_path):
    # link(2) refuses an existing name: a file created by someone else during the run stays
    t = tmp_path / "race.csv"
    with pytest.raises(RequestError, match="appeared"):
        with Outputs() as plan:
            plan.file(t)
            plan.stage(t, "ours\n")
            t.write_text("theirs\n")
            plan.commit()
    assert t.read_text() == "theirs\n"
    assert _leftovers(tmp_path) == []


def test_temporaries_of_killed_processes_are_removed(tmp_path):
    t = tmp_path / "x.nc"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(dead.stdout)  # that process has exited
    stale = tmp_path / f".x.nc.{dead_pid}-abc.tmp"
    live = tmp_path / f".x.nc.{os.getppid()}-def.tmp"  # a running process: its write may be in progress
    other = tmp_path / f".y.nc.{dead_pid}-ghi.tmp"  # another target: not ours to touch
    for p in (stale, live, other):
        p.write_bytes(b"partial")
    assert clean_stale(t) == [stale]
    assert not stale.exists() and live.exists() and other.exists()
    Outputs().file(t)  # planning a target cleans its dead temporaries too
    assert live.exists()


def test_a_writer_function_gets_the_temporary_path(tmp_path):
    # for libraries that write to a path (the sample generator's NetCDF writer)
    seen = []

    def writer(p):
        seen.append(p)
        p.write_bytes(b"written by a library")

    atomic_write(tmp_path / "lib.nc", writer)
    assert (tmp_path / "lib.nc").read_bytes() == b"written by a library"
    assert seen[0].parent == tmp_path and seen[0].name.startswith(".lib.nc.") and not seen[0].exists()
    with pytest.raises(ZeroDivisionError):
        atomic_write(tmp_path / "lib.nc", lambda p: 1 / 0)  # a failing writer: old file kept
    assert (tmp_path / "lib.nc").read_bytes() == b"written by a library" and _leftovers(tmp_path) == []


def test_keep_suffix_for_writers_that_read_the_format_from_the_name(tmp_path):
    # matplotlib's savefig and ffmpeg pick a format by extension: the temporary ends in .tmp.png
    seen = []
    atomic_write(tmp_path / "fig.png", lambda p: (seen.append(p.name), p.write_bytes(b"png")), keep_suffix=True)
    assert seen[0].endswith(".tmp.png") and (tmp_path / "fig.png").read_bytes() == b"png"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    stale = tmp_path / f".fig.png.{int(dead.stdout)}-x.tmp.png"
    stale.write_bytes(b"half")
    assert clean_stale(tmp_path / "fig.png") == [stale]
