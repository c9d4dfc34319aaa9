"""Never a lost file, never a traceback: `fluxfence run` on the file cases of issue 12.

Each case runs the real command in a subprocess and checks the exit status (5 for a request
problem, 130 after Ctrl-C, 143 after SIGTERM: the shell's 128 + signal number), one stderr line
with the key word, no traceback, and that files which existed before are byte for byte the same.
Signals are real signals sent to the real process; FLUXFENCE_HOLD makes it wait at a named
point (after the computation, or between two outputs) so the signal lands there every time.
The inputs are the invented sample, copied per test; nothing binary is committed.
"""

import hashlib
import os
import shutil
import signal
import subprocess
import sys
import threading
from pathlib import Path

import pandas as pd
import pytest

from budget.errors import RequestError

EXIT_REQUEST = RequestError.exit_code


def cli(*args, env=None, **kw):
    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)], capture_output=True, text=True,
                          timeout=300, env=env, **kw)


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def snapshot(folder: Path) -> dict:
    """Every file under `folder` with its hash: what must stay untouched."""
    return {str(p.relative_to(folder)): digest(p) for p in sorted(folder.rglob("*")) if p.is_file()}


def one_line(stderr: str, word: str) -> str:
    """The run's complaint: exactly one 'fluxfence:' line, holding `word`, and no traceback."""
    assert "Traceback" not in stderr, stderr
    lines = [ln for ln in stderr.splitlines() if ln.startswith("fluxfence:")]
    assert len(lines) == 1, stderr
    assert word in lines[0], stderr
    return lines[0]


def temporaries(folder: Path) -> list:
    return sorted(p.name for p in folder.rglob("*.tmp"))


@pytest.fixture(scope="module")
def sample():
    from sample_fields import ensure_sample

    return ensure_sample()


@pytest.fixture
def demo(sample, tmp_path):
    d = tmp_path / "demo"
    d.mkdir()
    for p in (sample.levels, sample.column, sample.basin):
        shutil.copyfile(p, d / Path(p).name)
    return d


def run_args(demo, *extra):
    return ["run", demo / "demo_column.nc", "--region", demo / "basin.geojson", "--quiet", *extra]


def stop_at(point, sig, args, timeout=120):
    """Start the command, wait until it holds at `point`, send `sig`; returns the finished process."""
    env = dict(os.environ, FLUXFENCE_HOLD=point)
    p = subprocess.Popen([sys.executable, "-m", "app.cli", *map(str, args)], stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, text=True, env=env)
    seen = []
    reached = threading.Event()

    def reader():
        for line in p.stderr:
            seen.append(line)
            if f"holding at {point}" in line:
                reached.set()
        reached.set()

    t = threading.Thread(target=reader, daemon=True)
    t.start()
    assert reached.wait(timeout), "the run never reached the hold point"
    assert p.poll() is None, "".join(seen)
    p.send_signal(sig)
    p.wait(timeout=timeout)
    t.join(timeout=10)
    p.stdout.close()
    return p.returncode, "".join(seen)


# -- files lost ---------------------------------------------------------------------------------
def test_existing_netcdf_is_refused_before_computing(demo, tmp_path):
    keep = tmp_path / "keep.nc"
    keep.write_bytes(b"precious results")
    before = snapshot(tmp_path)
    r = cli(*run_args(demo, "--out", tmp_path / "b.csv", "--netcdf", keep))
    assert r.returncode == EXIT_REQUEST
    one_line(r.stderr, "--overwrite")
    assert snapshot(tmp_path) == before  # not even the CSV, nor a .partial folder: refused first


def test_an_input_is_never_an_output_whatever_the_flags(demo, tmp_path):
    before = snapshot(tmp_path)
    for extra in (["--out", tmp_path / "b.csv", "--netcdf", demo / "demo_column.nc", "--overwrite"],
                  ["--out", demo / "basin.geojson", "--overwrite"],
                  ["--out", tmp_path / "b.csv", "--resume-dir", demo / "demo_column.nc"]):
        r = cli(*run_args(demo, *extra))
        assert r.returncode == EXIT_REQUEST
        one_line(r.stderr, "one of the inputs")
    assert snapshot(tmp_path) == before


@pytest.mark.parametrize("sig, status", [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_stop_between_the_csv_and_the_netcdf_writes_neither(demo, tmp_path, sig, status):
    out, nc = tmp_path / "b.csv", tmp_path / "b.nc"
    out.write_text("old csv\n")
    nc.write_bytes(b"old netcdf")
    before = snapshot(tmp_path)
    code, err = stop_at("staged", sig, run_args(demo, "--out", out, "--netcdf", nc, "--overwrite"))
    assert code == status
    one_line(err, "no output was written")
    assert out.read_text() == "old csv\n" and nc.read_bytes() == b"old netcdf"  # an old pair stays a pair
    assert temporaries(tmp_path) == []
    assert {k: v for k, v in snapshot(tmp_path).items() if ".partial" not in k} == before


def test_ctrl_c_after_computing_keeps_the_steps_and_the_rerun_writes_them(demo, tmp_path):
    out = tmp_path / "b.csv"
    code, err = stop_at("computed", signal.SIGINT, run_args(demo, "--out", out))
    assert code == 130
    line = one_line(err, "computed steps are kept")
    partial = tmp_path / "b.csv.partial"
    assert str(partial) in line and list(partial.glob("block_*"))  # every step is on disk
    assert not out.exists() and temporaries(tmp_path) == []
    r = cli(*run_args(demo, "--out", out))
    assert r.returncode == 0, r.stderr
    assert not partial.exists()  # removed only once the outputs are in place
    assert len(pd.read_csv(out)) == 21  # the sample's 21 six-hourly steps, 15 to 20 January


def test_sigkill_leftover_temporary_is_cleaned_by_the_next_run(demo, tmp_path):
    out, nc = tmp_path / "b.csv", tmp_path / "b.nc"
    code, _ = stop_at("staged", signal.SIGKILL, run_args(demo, "--out", out, "--netcdf", nc))
    assert code == -signal.SIGKILL
    assert temporaries(tmp_path)  # SIGKILL cannot be caught: the staged CSV is left as a hidden .tmp
    assert not out.exists() and not nc.exists()
    # the rerun, under umask 022: POSIX gives a new file 0666 & ~umask = 0644 (not mkstemp's 0600)
    r = cli(*run_args(demo, "--out", out, "--netcdf", nc), preexec_fn=lambda: os.umask(0o022))
    assert r.returncode == 0, r.stderr
    assert temporaries(tmp_path) == [] and out.exists() and nc.exists()
    assert oct(os.stat(out).st_mode & 0o777) == oct(os.stat(nc).st_mode & 0o777) == oct(0o644)


# -- crashes that must be one sentence -------------------------------------------------------------
def test_out_naming_an_existing_folder_is_refused_before_computing(demo, tmp_path):
    (tmp_path / "adir.csv").mkdir()
    r = cli(*run_args(demo, "--out", tmp_path / "adir.csv"))
    assert r.returncode == EXIT_REQUEST
    one_line(r.stderr, "existing folder")
    assert list((tmp_path / "adir.csv").iterdir()) == [] and not list(tmp_path.glob("*.partial"))


@pytest.fixture
def mounted(tmp_path):
    """Mount a tmpfs with options (root only); yields the folder, unmounts afterwards."""
    made = []

    def mount(options):
        d = tmp_path / f"mnt{len(made)}"
        d.mkdir()
        r = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(d)], capture_output=True)
        if r.returncode != 0:
            return None
        made.append(d)
        return d

    yield mount
    for d in made:
        subprocess.run(["umount", str(d)], capture_output=True)


@pytest.fixture
def read_only_folder(tmp_path, mounted):
    if os.geteuid() != 0:
        d = tmp_path / "ro"
        d.mkdir()
        d.chmod(0o555)
        yield d
        d.chmod(0o755)
        return
    d = mounted("ro,size=1m")  # root writes through 0555 folders: a read-only file system then
    if d is None:
        pytest.skip("running as root where tmpfs cannot be mounted: no way to make a read-only folder")
    yield d


def test_read_only_folder(demo, tmp_path, read_only_folder):
    r = cli(*run_args(demo, "--out", read_only_folder / "b.csv"))
    assert r.returncode == EXIT_REQUEST
    one_line(r.stderr, "read-only")
    assert list(read_only_folder.iterdir()) == []


@pytest.mark.parametrize("size, what", [("4k", "csv"), ("12k", "netcdf")])
def test_disk_full_on_a_tiny_file_system(demo, tmp_path, mounted, size, what):
    # a real full disk: a tmpfs of one page already taken by a file of the user's (the CSV
    # cannot be written), or of three pages (the ~3 kB CSV fits, the ~33 kB NetCDF does not);
    # root only, so the in-process test below covers the case everywhere
    d = mounted(f"size={size}")
    if d is None:
        pytest.skip("no tmpfs here (needs root): the in-process disk-full test covers this case")
    (d / "mine.txt").write_text("x")
    r = cli(*run_args(demo, "--out", d / "b.csv", "--netcdf", d / "b.nc", "--resume-dir", tmp_path / "steps"))
    assert r.returncode == EXIT_REQUEST, r.stderr
    one_line(r.stderr, "disk is full")
    assert [p.name for p in d.iterdir()] == ["mine.txt"] and (d / "mine.txt").read_text() == "x"


def test_disk_full_in_process(demo, tmp_path, monkeypatch, capsys):
    # everywhere: the NetCDF's write fails with ENOSPC (injected) after the CSV was staged
    import errno

    from app.cli import main
    from budget import outputs

    real = outputs._write_temp

    def full_on_netcdf(target, data, *rest):
        if Path(target).suffix == ".nc":
            raise outputs._os_error(OSError(errno.ENOSPC, "No space left on device"), Path(target), "--netcdf")
        return real(target, data, *rest)

    monkeypatch.setattr(outputs, "_write_temp", full_on_netcdf)
    out, nc = tmp_path / "b.csv", tmp_path / "b.nc"
    assert main([str(a) for a in run_args(demo, "--out", out, "--netcdf", nc)]) == EXIT_REQUEST
    one_line(capsys.readouterr().err, "disk is full")
    assert not out.exists() and not nc.exists() and temporaries(tmp_path) == []


# -- messages that mislead ---------------------------------------------------------------------
def test_leftover_resume_folder_of_another_run_names_the_ways_out(demo, tmp_path):
    out = tmp_path / "b.csv"
    code, _ = stop_at("computed", signal.SIGINT, run_args(demo, "--out", out))
    assert code == 130
    partial = tmp_path / "b.csv.partial"
    kept = snapshot(partial)
    changed = run_args(demo, "--out", out, "--start", "2025-01-16")  # another time window: another run
    r = cli(*changed)
    assert r.returncode == EXIT_REQUEST
    line = one_line(r.stderr, "--restart")
    assert "--resume-dir" in line
    assert snapshot(partial) == kept and not out.exists()
    r = cli(*changed, "--resume-dir", tmp_path / "elsewhere")  # keep the old steps, resume elsewhere
    assert r.returncode == 0, r.stderr
    assert snapshot(partial) == kept and not (tmp_path / "elsewhere").exists()
    r = cli(*changed, "--restart", "--overwrite")
    assert r.returncode == 0, r.stderr
    assert not partial.exists() and len(pd.read_csv(out)) == 17  # 16 Jan 00Z to 20 Jan 00Z, 6-hourly


def test_restart_leaves_a_folder_that_is_not_a_resume_folder(demo, tmp_path):
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("my notes\n")
    r = cli(*run_args(demo, "--out", tmp_path / "b.csv", "--resume-dir", mine, "--restart"))
    assert r.returncode == EXIT_REQUEST
    one_line(r.stderr, "does not look like a resume folder")
    assert (mine / "notes.txt").read_text() == "my notes\n"
