"""`fluxfence figure` (app/figure_cmd.py): from fields or a saved budget, animations checked
with ffprobe (frame count and duration), and one-sentence refusals."""

from __future__ import annotations

import json
import shutil
import subprocess

import pytest

from app.cli import main
from sample_fields import ensure_sample


@pytest.fixture(scope="module")
def sample():
    return ensure_sample()


@pytest.fixture(autouse=True)
def no_network(monkeypatch):
    import socket

    def refuse(*args, **kwargs):
        raise AssertionError("network access attempted")

    monkeypatch.setattr(socket.socket, "connect", refuse)


def _frames_and_seconds(path) -> tuple[int, float, str]:
    """(frames, duration in s, frame rate) of a video: by ffprobe (Debian's ffmpeg) when present,
    else by the imageio-ffmpeg wheel's reader (decodes every frame)."""
    if shutil.which("ffprobe"):
        out = subprocess.run(["ffprobe", "-v", "error", "-count_frames", "-select_streams", "v:0", "-show_entries",
                              "stream=nb_read_frames,r_frame_rate:format=duration", "-of", "json", str(path)],
                             capture_output=True, text=True, check=True).stdout
        info = json.loads(out)
        stream = info["streams"][0]
        return int(stream["nb_read_frames"]), float(info["format"]["duration"]), stream["r_frame_rate"]
    import imageio_ffmpeg

    frames, seconds = imageio_ffmpeg.count_frames_and_secs(str(path))
    return frames, seconds, ""


def test_animation_frame_count_and_duration(sample, tmp_path, capsys):
    import imageio_ffmpeg

    out = tmp_path / "event.mp4"
    # 2025-01-16 00:00 .. 2025-01-17 12:00 at 6-hourly steps: 7 steps, one frame each
    code = main([
        "figure", str(sample.levels), "--region", str(sample.basin), "--animate", str(out),
        "--start", "2025-01-16T00:00", "--end", "2025-01-17T12:00", "--fps", "3.5",
    ])
    assert code == 0, capsys.readouterr().err
    frames, seconds, rate = _frames_and_seconds(out)
    assert frames == 7
    assert rate in ("7/2", "")
    assert seconds == pytest.approx(7 / 3.5, abs=0.05)  # frames / rate
    assert "encoded with" in capsys.readouterr().err
    reader = imageio_ffmpeg.read_frames(str(out))  # the stream's metadata comes first
    meta = next(reader)
    reader.close()
    assert tuple(meta["size"]) == (1280, 720)


def test_gif_animation_frames(sample, tmp_path, capsys):
    from PIL import Image

    out = tmp_path / "event.gif"
    code = main(["figure", str(sample.levels), "--region", str(sample.basin), "--animate", str(out),
                 "--end", "2025-01-15T18:00", "--fps", "2"])
    assert code == 0, capsys.readouterr().err
    with Image.open(out) as gif:
        assert gif.n_frames == 4  # 00, 06, 12, 18 UTC
        assert gif.info["duration"] == pytest.approx(500, abs=10)  # ms per frame at 2 fps


def test_figure_from_a_saved_budget_without_recomputing(sample, tmp_path, capsys, monkeypatch):
    nc = tmp_path / "b.nc"
    assert main(["run", str(sample.levels), "--region", str(sample.basin), "--out", str(tmp_path / "b.csv"),
                 "--netcdf", str(nc), "--quiet"]) == 0

    import budget.ledger

    def no_compute(*args, **kwargs):
        raise AssertionError("the budget was recomputed")

    monkeypatch.setattr(budget.ledger, "compute", no_compute)
    for layout in ("series", "boundary", "climatology"):
        out = tmp_path / f"{layout}.png"
        assert main(["figure", "--budget", str(nc), "--layout", layout, "--out", str(out)]) == 0, capsys.readouterr().err
        assert out.stat().st_size > 15_000
    # a map needs the fields, but still not a new budget
    out = tmp_path / "map.pdf"
    assert main(["figure", str(sample.levels), "--budget", str(nc), "--layout", "map", "--out", str(out)]) == 0
    assert out.read_bytes()[:5] == b"%PDF-"


def test_discharge_goes_on_the_climatology(sample, tmp_path, capsys):
    csv = tmp_path / "river.csv"
    csv.write_text("time,discharge_m3_s\n2025-01-15,900\n2025-01-16,1500\n2025-01-17,2100\n", encoding="utf-8")
    out = tmp_path / "clim.svg"
    assert main(["figure", str(sample.levels), "--region", str(sample.basin), "--layout", "climatology",
                 "--discharge", str(csv), "--out", str(out)]) == 0, capsys.readouterr().err
    assert "river discharge" in out.read_text(encoding="utf-8")


@pytest.mark.parametrize("argv_tail, message", [
    (["--out", "x.jpg"], "end the name in .png, .pdf or .svg"),
    (["--animate", "x.avi"], "end the name in .mp4 or .gif"),
    ([], "Say where to write"),
    (["--out", "{levels}"], "is one of the inputs"),
    (["--out", "{exists}"], "exists already"),
    (["--out", "f.png", "--style", "poster"], None),
])
def test_refusals_are_one_sentence(sample, tmp_path, capsys, argv_tail, message):
    exists = tmp_path / "old.png"
    exists.write_bytes(b"keep me")
    tail = [a.format(levels=sample.levels, exists=exists) for a in argv_tail]
    argv = ["figure", str(sample.levels), "--region", str(sample.basin), *tail]
    if message is None:  # argparse refuses an unknown style itself
        with pytest.raises(SystemExit):
            main(argv)
        return
    assert main(argv) != 0
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
    assert exists.read_bytes() == b"keep me"


def test_budget_file_that_is_not_a_budget(sample, tmp_path, capsys):
    assert main(["figure", "--budget", str(sample.levels), "--layout", "series", "--out", str(tmp_path / "s.png")]) != 0
    assert "is not a Fluxfence budget" in capsys.readouterr().err
    assert main(["figure", "--budget", str(tmp_path / "none.nc"), "--layout", "series", "--out", str(tmp_path / "s.png")]) != 0
    assert "does not exist" in capsys.readouterr().err
    assert main(["figure", "--layout", "map", "--out", str(tmp_path / "m.png")]) != 0
    assert "Give the field files" in capsys.readouterr().err


def test_too_many_frames_is_refused_before_drawing(sample, tmp_path, capsys, monkeypatch):
    import app.figure_cmd

    monkeypatch.setattr(app.figure_cmd, "FRAME_LIMIT", 5)
    out = tmp_path / "long.gif"
    assert main(["figure", str(sample.levels), "--region", str(sample.basin), "--animate", str(out)]) != 0
    assert "holds 21 time steps" in capsys.readouterr().err and not out.exists()


def test_mp4_without_a_system_ffmpeg_uses_the_wheel(sample, tmp_path, capsys, monkeypatch):
    import app.report.motion as motion

    monkeypatch.setattr(motion.shutil, "which", lambda name: None)  # as on a machine without Debian's ffmpeg
    assert motion.ffmpeg_program()[1] == "imageio-ffmpeg wheel"
    out = tmp_path / "short.mp4"
    assert main(["figure", str(sample.levels), "--region", str(sample.basin), "--animate", str(out),
                 "--end", "2025-01-15T06:00", "--fps", "2"]) == 0, capsys.readouterr().err
    assert "encoded with imageio-ffmpeg wheel" in capsys.readouterr().err
    assert _frames_and_seconds(out)[0] == 2


# -- one output transaction (budget.outputs): refusals come before any computing -------------------
def _no_figure_data(monkeypatch):
    import app.figure_cmd

    def refuse(*a, **k):
        raise AssertionError("computed before the outputs were checked")

    monkeypatch.setattr(app.figure_cmd, "figure_data", refuse)


def test_existing_figure_refused_before_computing(sample, tmp_path, capsys, monkeypatch):
    keep = tmp_path / "old.gif"
    keep.write_bytes(b"keep me")
    _no_figure_data(monkeypatch)
    code = main(["figure", str(sample.levels), "--region", str(sample.basin), "--out", str(tmp_path / "new.png"),
                 "--animate", str(keep)])
    err = capsys.readouterr().err
    assert code != 0 and "exists already" in err and "--animate" in err and "Traceback" not in err
    assert keep.read_bytes() == b"keep me" and sorted(p.name for p in tmp_path.iterdir()) == ["old.gif"]


def test_figure_input_as_output_refused_even_with_overwrite(sample, tmp_path, capsys, monkeypatch):
    import shutil as sh

    region = tmp_path / "basin.svg"  # an input whose name a figure could take
    sh.copy(sample.basin, region)
    before = region.read_bytes()
    _no_figure_data(monkeypatch)
    code = main(["figure", str(sample.levels), "--region", str(region), "--out", str(region), "--overwrite"])
    err = capsys.readouterr().err
    assert code != 0 and "one of the inputs" in err and len(err.strip().splitlines()) == 1
    assert region.read_bytes() == before


def test_figure_and_animation_land_together(sample, tmp_path, capsys):
    # both outputs of one command are committed together: a PNG (by its signature, PNG spec
    # section 5.2) and a GIF (by its header, GIF89a spec), nothing else left in the folder
    png, gif = tmp_path / "s.png", tmp_path / "e.gif"
    assert main(["figure", str(sample.levels), "--region", str(sample.basin), "--layout", "series", "--out", str(png),
                 "--animate", str(gif), "--end", "2025-01-15T06:00", "--dpi", "50"]) == 0, capsys.readouterr().err
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and gif.read_bytes()[:6] == b"GIF89a"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["e.gif", "s.png"]
