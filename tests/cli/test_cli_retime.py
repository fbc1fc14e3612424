"""``graphs/retime.json`` end to end through the command line, on small EXR sequences.

design.md: output frame k of dst shows source time first + (k - first) / slowdown, numbered from
first; integer source times pass through unchanged, bit for bit (OpenEXR half and float pixels,
checked through OpenEXR's own reader). The in-betweens are compared with the exact picture of the
invented scene and with the cross-dissolve baseline (Baker et al., IJCV 2011).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.cli.test_cli_run import cli, cli_proc, raw_channels, write_plate
from tests.conftest import GRAPHS

H, W = 48, 64
FIRST = 1001


def picture(t: float, dtype) -> dict[str, np.ndarray]:
    """A textured square moving 4 px right per frame over a still textured background, premultiplied
    RGBA plus an extra layer, at time ``t`` frames after the first (exact at any t)."""
    y, x = np.mgrid[0:H, 0:W].astype(np.float64)
    bg = 0.4 + 0.2 * np.sin(0.5 * x + 0.2 * y) * np.cos(0.3 * y - 0.1 * x)
    left = 12 + 4 * t
    inside = (x >= left) & (x < left + 16) & (y >= 14) & (y < 32)
    fg = 0.75 + 0.2 * np.sin(1.3 * (x - left)) * np.cos(0.7 * y)
    lum = np.where(inside, fg, bg)
    planes = {"R": lum, "G": 0.8 * lum + 0.05 * np.where(inside, 1.0, 0.0), "B": 0.6 * bg + 0.1,
              "A": np.ones((H, W)), "extra.id": np.where(inside, 1.0, 0.0)}
    return {k: v.astype(dtype) for k, v in planes.items()}


def sequence(folder, n: int, dtype) -> str:
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n):
        write_plate(folder / f"sh.{FIRST + i:04d}.exr", picture(i, dtype))
    return str(folder / "sh.%04d.exr")


def run_retime(src: str, dst: str, slowdown: str, *extra: str):
    return cli("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set", f"dst={dst}",
               "--set", f"slowdown={slowdown}", "-q", *extra)


@pytest.mark.parametrize("dtype", [np.float16, np.float32], ids=["half", "float"])
def test_whole_source_times_pass_through_bit_for_bit(tmp_path, dtype):
    src = sequence(tmp_path / "src", 4, dtype)
    rc, _, err = run_retime(src, f"{tmp_path}/out/o.%04d.exr", "2")
    assert rc == 0, err
    names = sorted(p.name for p in (tmp_path / "out").iterdir())
    assert names == [f"o.{k}.exr" for k in range(1001, 1008)]       # 3 * 2 = 6 frames on
    for j in range(4):                      # output first + j * slowdown shows source first + j
        a = raw_channels(tmp_path / "src" / f"sh.{FIRST + j}.exr")
        b = raw_channels(tmp_path / "out" / f"o.{FIRST + 2 * j}.exr")
        assert sorted(a) == sorted(b)
        for name in a:
            assert a[name].dtype == b[name].dtype and a[name].tobytes() == b[name].tobytes(), name


def test_inbetweens_beat_the_dissolve_end_to_end(tmp_path):
    """Vectors estimated by the template's own flow-estimate; the in-between at source time
    first + 1/2 against the exact picture, and against the cross-dissolve of its neighbours."""
    src = sequence(tmp_path / "src", 4, np.float32)
    rc, _, err = run_retime(src, f"{tmp_path}/out/o.%04d.exr", "2")
    assert rc == 0, err
    for j in range(3):
        got = raw_channels(tmp_path / "out" / f"o.{FIRST + 2 * j + 1}.exr")
        truth = picture(j + 0.5, np.float32)
        lo, hi = picture(j, np.float32), picture(j + 1, np.float32)
        ours = np.mean([np.abs(got[c] - truth[c]).mean() for c in "RGB"])
        dissolve = np.mean([np.abs(0.5 * lo[c] + 0.5 * hi[c] - truth[c]).mean() for c in "RGB"])
        assert np.isfinite(ours) and ours < 0.5 * dissolve, (j, ours, dissolve)


def test_slowdown_2_5_numbering(tmp_path):
    """design.md numbering: source 1001-1004 at slowdown 2.5 -> outputs 1001-1008 (3 * 2.5 = 7.5,
    floored); output 1006 shows source 1003 exactly."""
    src = sequence(tmp_path / "src", 4, np.float16)
    proc = cli_proc("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                    f"dst={tmp_path}/out/o.%04d.exr", "--set", "slowdown=2.5")
    assert proc.returncode == 0, proc.stderr
    names = sorted(p.name for p in (tmp_path / "out").iterdir())
    assert names == [f"o.{k}.exr" for k in range(1001, 1009)]
    a, b = raw_channels(tmp_path / "src" / "sh.1003.exr"), raw_channels(tmp_path / "out" / "o.1006.exr")
    assert all(a[n].tobytes() == b[n].tobytes() for n in a)


def test_one_frame_sequence_passes_through(tmp_path):
    src = sequence(tmp_path / "src", 1, np.float32)
    rc, _, err = run_retime(src, f"{tmp_path}/out/o.%04d.exr", "3")
    assert rc == 0, err
    assert [p.name for p in (tmp_path / "out").iterdir()] == ["o.1001.exr"]


@pytest.mark.parametrize("slowdown, words", [("0", "greater than 0"), ("-2", "greater than 0")])
def test_bad_slowdown_exits_2_without_traceback(tmp_path, slowdown, words):
    src = sequence(tmp_path / "src", 2, np.float32)
    proc = cli_proc("run", str(GRAPHS / "retime.json"), "--set", f"src={src}", "--set",
                    f"dst={tmp_path}/out/o.%04d.exr", "--set", f"slowdown={slowdown}")
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert words in proc.stderr and "slowdown" in proc.stderr
    assert not (tmp_path / "out").exists()


def test_numbering_follows_the_source_whatever_its_first_frame(tmp_path):
    """design.md: output frame k shows source time first + (k - first) / slowdown, where first is
    src's first frame number; the template takes first from the files (no variable for it)."""
    folder = tmp_path / "src"
    folder.mkdir()
    for i in range(3):
        write_plate(folder / f"p.{1 + i:04d}.exr", picture(i, np.float32))
    rc, out, err = cli("check", str(GRAPHS / "retime.json"), "--set", f"src={folder}/p.%04d.exr",
                       "--set", f"dst={tmp_path}/out/o.%04d.exr", "--set", "slowdown=2")
    assert rc == 0, err
    assert "frames 1-5" in out


def test_template_declares_exactly_the_design_variables():
    """design.md, shipped templates: retime.json (src, dst, slowdown)."""
    import json

    doc = json.loads((GRAPHS / "retime.json").read_text())
    assert sorted(doc["vars"]) == ["dst", "slowdown", "src"]


def test_speed_up_with_shutter_blur_from_a_show_defaults_file(tmp_path):
    """A x2 speed-up: without a shutter, output frames are the even source frames unchanged; with a
    180-degree shutter (common practice) set in a show defaults file, the moving square is smeared
    along its motion while the still background stays as it was."""
    import json

    src = sequence(tmp_path / "src", 5, np.float32)
    rc, _, err = run_retime(src, f"{tmp_path}/sharp/o.%04d.exr", "0.5")
    assert rc == 0, err
    show = tmp_path / "show.json"
    show.write_text(json.dumps({"schema": "midframe.defaults", "version": 1,
                                "params": {"retime": {"shutter": 180, "shutter_samples": 4}}}))
    rc, _, err = run_retime(src, f"{tmp_path}/blur/o.%04d.exr", "0.5", "--defaults", str(show))
    assert rc == 0, err
    sharp = raw_channels(tmp_path / "sharp" / f"o.{FIRST + 1:04d}.exr")["R"].astype(np.float64)
    blur = raw_channels(tmp_path / "blur" / f"o.{FIRST + 1:04d}.exr")["R"].astype(np.float64)
    truth = picture(2, np.float64)["R"]
    assert np.array_equal(sharp, picture(2, np.float32)["R"].astype(np.float64))  # source frame 1003
    still = (np.abs(picture(1.75, np.float64)["R"] - truth) < 1e-9) & (np.abs(picture(2.25, np.float64)["R"] - truth) < 1e-9)
    moving = ~still
    err_still, err_moving = np.abs(blur - truth)[still], np.abs(blur - truth)[moving]
    assert err_still.mean() < 0.002 and np.percentile(err_still, 99) < 0.02  # background as it was
    assert err_moving.mean() > 5 * err_still.mean() and err_moving.mean() > 0.01  # the square is smeared
