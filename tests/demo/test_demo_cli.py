"""`midframe demo OUTDIR` end to end: files, the measured error against the ground truth (the
composite, the slow motion and the sweep, before and after), the contact sheet, the page (also
loaded in a headless browser), and the folder rules (a foreign folder is refused, a demo folder
reused).

The demo runs once per module in a subprocess (about 100 s on 2 shared cores; the tests that use
it are marked slow) and the tests read what it left. The checks recompute everything from the
files with their own code, so a demo that wrote wrong numbers into summary.json would fail here.
"""

from __future__ import annotations

import json
import math
import os
import shlex
import subprocess
import sys
import time
from html.parser import HTMLParser
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np
import pytest

from graphcore.errors import InputError
from graphcore.image import Image
from operators.io.exr import read_exr

FRAMES = list(range(1001, 1025))  # the embedded default: 24 frames numbered from 1001 (common practice)
WIDTH, HEIGHT = 480, 270
REPO = Path(__file__).resolve().parents[2]

# IEEE 754-2008 binary16 (OpenEXR's half, OpenEXR Technical Introduction): 11-bit significand, so
# round-to-nearest moves a normal value by at most 2**-11 of itself; subnormal spacing is 2**-24.
HALF_U = 2.0 ** -11


def _run(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ, OPENCV_LOG_LEVEL="ERROR")
    return subprocess.run([sys.executable, "-m", "graphcore", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


def _srgb_encode(x: np.ndarray) -> np.ndarray:
    # IEC 61966-2-1 sRGB transfer function, written out here independently of operators.io.transfer
    x = np.asarray(x, np.float64)
    a = np.abs(x)
    v = np.where(a <= 0.0031308, 12.92 * a, 1.055 * np.power(np.maximum(a, 0.0031308), 1 / 2.4) - 0.055)
    return np.copysign(v, x)


def _psnr(a: np.ndarray, b: np.ndarray) -> float:
    # PSNR = 10 log10(peak**2 / MSE), peak 1 on sRGB-encoded values (Baker et al., IJCV 2011,
    # interpolation protocol; the PSNR formula itself is common practice)
    mse = float(np.mean((a - b) ** 2))
    return math.inf if mse == 0 else 10 * math.log10(1.0 / mse)


def _rgba(path: str | Path) -> np.ndarray:
    return read_exr(str(path)).select(("R", "G", "B", "A")).pixels


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """Run the demo once into a fresh folder; returns (outdir, completed process, seconds, summary)."""
    base = tmp_path_factory.mktemp("demo")
    out = base / "out"
    t0 = time.perf_counter()
    proc = _run("demo", str(out), cwd=base)
    seconds = time.perf_counter() - t0
    summary = json.loads((out / "summary.json").read_text()) if (out / "summary.json").is_file() else None
    return out, proc, seconds, summary


@pytest.mark.slow
def test_demo_exits_zero_and_says_where_to_look(demo):
    out, proc, seconds, summary = demo
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    assert str(out / "index.html") in proc.stdout
    assert str(out / "comp") in proc.stdout
    assert "midframe run " in proc.stdout
    # progress on stderr in the CLI's style, the summary on stdout
    assert all(line.startswith("midframe") for line in proc.stderr.splitlines() if line.strip())
    assert summary is not None and summary["frames"] == FRAMES
    for where in ("retime", "sweep", "vectors", "contact_sheet.png"):
        assert str(out / where) in proc.stdout
    # no timed assertion (speed targets live in bench/); the demo's own timing is in the summary
    assert summary["timings"]["total_s"] > 0


@pytest.mark.slow
def test_plates_truth_and_comp_exist_and_load(demo):
    out = demo[0]
    bg = read_exr(str(out / "plates" / "bg.exr"))
    assert bg.size == (WIDTH, HEIGHT) and set(bg.meta["exr.pixel_types"].values()) == {"half"}
    for f in FRAMES:
        fg = read_exr(str(out / "plates" / f"fg.{f:04d}.exr"))
        matte = read_exr(str(out / "plates" / f"matte.{f:04d}.exr"))
        truth = read_exr(str(out / "truth" / f"comp.{f:04d}.exr"))
        comp = read_exr(str(out / "comp" / f"comp.{f:04d}.exr"))
        assert fg.channels == ("R", "G", "B", "A") and matte.channels == ("A",)
        assert set(fg.meta["exr.pixel_types"].values()) == {"half"}
        assert set(truth.meta["exr.pixel_types"].values()) == {"float"}
        assert set(comp.meta["exr.pixel_types"].values()) == {"float"}  # the template's default
        for img in (fg, matte, truth, comp):
            assert img.size == (WIDTH, HEIGHT) and np.isfinite(img.pixels).all()
        # the matte plate is the foreground's alpha (the scene writes it so)
        np.testing.assert_array_equal(matte.pixels[..., 0], fg.channel("A"))
        assert 0.01 < matte.pixels.mean() < 0.3  # a real foreground, not an empty or full matte
    assert not (out / "comp").joinpath("comp.1000.exr").exists()
    assert not (out / "comp").joinpath("comp.1025.exr").exists()


@pytest.mark.slow
def test_composite_is_the_truth_up_to_half_float_rounding(demo):
    out, _, _, summary = demo
    rgb = slice(0, 3)
    bg = _rgba(out / "plates" / "bg.exr")
    worst_ratio, psnrs, max_srgb, bg_psnrs = 0.0, [], 0.0, []
    for f in FRAMES:
        comp = _rgba(out / "comp" / f"comp.{f:04d}.exr")
        truth = _rgba(out / "truth" / f"comp.{f:04d}.exr")
        fg = _rgba(out / "plates" / f"fg.{f:04d}.exr")
        m = read_exr(str(out / "plates" / f"matte.{f:04d}.exr")).channel("A")[..., None]
        # Porter & Duff 1984, over on premultiplied colour with the matte as fg's alpha: the engine's
        # arithmetic on the stored plates must be the formula's (float32, same operation order)
        over = fg[..., rgb] + (1.0 - m) * bg[..., rgb]
        np.testing.assert_allclose(comp[..., rgb], over, rtol=0, atol=1e-6)
        np.testing.assert_array_equal(comp[..., 3], 1.0)
        # Against the float truth: each half plate value is within HALF_U of the true one, so
        # |comp - truth| <= HALF_U * (fg + bg) per pixel (fg's rounding, the matte's times bg, bg's
        # times 1 - m); slack (ours) for float32 arithmetic and half subnormals.
        err = np.abs(comp[..., rgb].astype(np.float64) - truth[..., rgb])
        bound = (HALF_U + 2.0 ** -20) * (np.abs(fg[..., rgb]) + np.abs(bg[..., rgb])) + 2.0 ** -22
        worst_ratio = max(worst_ratio, float((err / bound).max()))
        enc_c, enc_t = _srgb_encode(comp[..., rgb]), _srgb_encode(truth[..., rgb])
        psnrs.append(_psnr(enc_c, enc_t))
        max_srgb = max(max_srgb, float(np.abs(enc_c - enc_t).max()))
        bg_psnrs.append(_psnr(_srgb_encode(bg[..., rgb]), enc_t))
    assert worst_ratio <= 1.0
    # floor (ours): the per-pixel bound above is the real check; measured here 83.8 dB
    assert min(psnrs) > 70.0
    # the metric can fail: the clean plate alone (no foreground) is far from the truth
    assert max(bg_psnrs) < 35.0
    # what the demo reported is what the files say
    err = summary["errors"]
    assert err["within_bound"] is True
    assert err["bound_ratio"] == pytest.approx(worst_ratio, rel=1e-6)
    assert err["max_abs_srgb"] == pytest.approx(max_srgb, rel=1e-6, abs=1e-12)
    assert err["min_psnr_srgb_db"] == pytest.approx(min(psnrs), rel=1e-6)
    assert [r["frame"] for r in err["per_frame"]] == FRAMES
    assert err["max_abs_vs_formula"] <= 1e-6


@pytest.mark.slow
def test_proxies_are_half_size_srgb_of_the_composite(demo):
    out = demo[0]
    for f in (FRAMES[0], FRAMES[11], FRAMES[-1]):
        png = cv2.imread(str(out / "proxy" / f"comp.{f:04d}.png"), cv2.IMREAD_UNCHANGED)
        assert png is not None and png.shape == (HEIGHT // 2, WIDTH // 2, 3) and png.dtype == np.uint8
        comp = _rgba(out / "comp" / f"comp.{f:04d}.exr")[..., :3]
        box = comp.reshape(HEIGHT // 2, 2, WIDTH // 2, 2, 3).mean(axis=(1, 3))  # 2x2 area average
        codes = np.clip(np.rint(_srgb_encode(box) * 255), 0, 255)  # IEC 61966-2-1, 8-bit
        assert np.abs(codes - png[..., ::-1].astype(np.float64)).max() <= 1


@pytest.mark.slow
def test_contact_sheet_decodes_to_its_layout(demo):
    from graphcore.demo import page

    out, _, _, summary = demo
    sheet = cv2.imread(str(out / "contact_sheet.png"), cv2.IMREAD_UNCHANGED)
    assert sheet is not None and sheet.dtype == np.uint8 and sheet.ndim == 3 and sheet.shape[2] == 3
    k = page.thumb_factor(WIDTH)
    tw, th = WIDTH // k, HEIGHT // k
    cs = summary["contact_sheet"]
    rows = cs["frames"]
    assert rows[0] == FRAMES[0] and rows[-1] == FRAMES[-1] and len(rows) == 4
    shape = [(len(page.COLUMNS), 4), (len(page.RETIME_COLUMNS), 2), (len(page.SWEEP_COLUMNS), 2)]
    w, h = page.sheet_size(shape, tw, th)
    assert (sheet.shape[1], sheet.shape[0]) == (w, h) == tuple(cs["size"])
    # 7 thumbnails of 240x135 across, 8 rows down: the sheet holds them all
    assert w >= 7 * 240 and h >= 8 * 135

    def panel(section: int, row: int, col: int) -> np.ndarray:
        x, y = page.panel_origin(shape, section, row, col, tw, th)
        return sheet[y:y + th, x:x + tw, ::-1].astype(np.float64)

    def shrunk(path) -> np.ndarray:
        img = _rgba(path)[..., :3]
        box = img.reshape(th, k, tw, k, 3).mean(axis=(1, 3))
        return np.clip(np.rint(_srgb_encode(box) * 255), 0, 255)

    # the comp thumbnail of the first row is the composite, shrunk (not a blank panel)
    p = panel(0, 0, 3)
    assert np.abs(shrunk(out / "comp" / f"comp.{FRAMES[0]:04d}.exr") - p).max() <= 1 and p.std() > 20
    # slow motion and sweep rows: truth, before, after are the files of that output frame
    for section, kind, frames in ((1, "retime", cs["retime_frames"]), (2, "sweep", cs["sweep_frames"])):
        assert len(frames) == 2
        for row, f in enumerate(frames):
            files = (out / "truth" / f"{kind}.{f:04d}.exr", out / kind / f"before.{f:04d}.exr",
                     out / kind / f"after.{f:04d}.exr")
            for col, path in enumerate(files):
                assert np.abs(shrunk(path) - panel(section, row, col)).max() <= 1, (kind, f, path)
            for col in (5, 6):  # vector pictures: not blank
                assert panel(section, row, col).std() > 5


class _Links(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.refs: list[str] = []
        self.tags: list[str] = []
        self.pre: list[str] = []
        self._in_pre = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self._in_pre = self._in_pre or tag == "pre"
        for name, value in attrs:
            if name in ("src", "href") and value:
                self.refs.append(value)

    def handle_endtag(self, tag):
        if tag == "pre":
            self._in_pre = False

    def handle_data(self, data):
        if self._in_pre:
            self.pre.append(data)


@pytest.mark.slow
def test_page_is_static_and_self_contained(demo):
    out = demo[0]
    text = (out / "index.html").read_text(encoding="utf-8")
    parser = _Links()
    parser.feed(text)
    assert "script" not in parser.tags and "<script" not in text.lower()
    assert not any(r.startswith(("http:", "https:", "//")) for r in parser.refs)
    assert "contact_sheet.png" in parser.refs
    for ref in parser.refs:  # every link points into the demo folder and exists, or into the page
        if ref.startswith("#"):
            assert f'id="{ref[1:]}"' in text, ref
        else:
            assert (out / ref).exists(), ref
    assert any(r.startswith("vectors/") and r.endswith(".png") for r in parser.refs)
    pre = "".join(parser.pre)
    assert "digraph midframe" in pre and '"comp" -> "out"' in pre
    assert "midframe run " in pre
    for f in FRAMES:
        assert f"<td>{f}</td>" in text


@pytest.mark.slow
def test_graph_copy_and_rerun_command_reproduce_the_composite(demo):
    out, proc, _, summary = demo
    assert (out / "demo-comp.json").read_bytes() == (REPO / "graphs" / "demo-comp.json").read_bytes()
    words = shlex.split(summary["command"])
    assert words[:3] == ["midframe", "run", str(out / "demo-comp.json")]
    assert summary["command"] in proc.stdout
    before = {f: _rgba(out / "comp" / f"comp.{f:04d}.exr") for f in (FRAMES[0], FRAMES[-1])}
    rerun = _run(*words[1:], "-q", cwd=out.parent)
    assert rerun.returncode == 0, rerun.stderr
    for f, pixels in before.items():
        np.testing.assert_array_equal(_rgba(out / "comp" / f"comp.{f:04d}.exr"), pixels)


def test_shipped_template_checks(tmp_path):
    proc = _run("check", str(REPO / "graphs" / "demo-comp.json"), cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    doc = json.loads((REPO / "graphs" / "demo-comp.json").read_text())
    for name, decl in doc["vars"].items():
        assert decl.get("doc"), f"variable {name} has no doc"


def test_a_foreign_folder_is_refused_and_left_intact(tmp_path):
    folder = tmp_path / "shots"
    folder.mkdir()
    (folder / "sh010_comp.1001.exr").write_bytes(b"not really an exr, but the user's")
    (folder / "notes.txt").write_text("mine")
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    proc = _run("demo", str(folder), cwd=tmp_path)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert str(folder) in proc.stderr and "not empty" in proc.stderr and "fix:" in proc.stderr
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before


def test_a_file_as_outdir_is_refused(tmp_path):
    target = tmp_path / "plate.exr"
    target.write_bytes(b"x")
    proc = _run("demo", str(target), cwd=tmp_path)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert "not a folder" in proc.stderr and target.read_bytes() == b"x"


@pytest.mark.slow
def test_rerun_into_the_same_demo_folder_with_two_jobs(demo):
    # the pool executor must give the serial run's pixels (design.md: outputs identical whichever
    # executor made them), and a demo folder is reused
    out = demo[0]
    before = {f: _rgba(out / "comp" / f"comp.{f:04d}.exr") for f in FRAMES}
    proc = _run("demo", str(out), "--jobs", "2", cwd=out.parent)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    for f, pixels in before.items():
        np.testing.assert_array_equal(_rgba(out / "comp" / f"comp.{f:04d}.exr"), pixels)
    assert json.loads((out / "summary.json").read_text())["jobs"] == 2


# -- the pieces, without a subprocess -----------------------------------------------------------
def test_claim_folder_rules(tmp_path):
    from graphcore.demo.run import MARKER, claim_folder

    fresh = claim_folder(str(tmp_path / "a" / "b"))  # created, parents too
    assert (fresh / MARKER).is_file()
    assert claim_folder(str(fresh)) == fresh  # a demo folder is reused
    empty = tmp_path / "empty"
    empty.mkdir()
    assert claim_folder(str(empty)) == empty
    forged = tmp_path / "forged"
    forged.mkdir()
    (forged / MARKER).write_text("something else")  # a marker name alone is not enough
    with pytest.raises(InputError) as info:
        claim_folder(str(forged))
    assert info.value.field == "OUTDIR" and info.value.fix and str(forged) in info.value.file
    assert (forged / MARKER).read_text() == "something else"


def test_measure_known_answers():
    from graphcore.demo.run import measure
    from operators.io.transfer import decode

    # sRGB-encoded 0.5 against 0.6 everywhere: max abs 0.1, MSE 0.01, PSNR 20 dB (definition)
    shape = (4, 6, 1)
    a = np.concatenate([np.broadcast_to(decode("srgb", np.float32(0.5)), shape)] * 3 + [np.ones(shape)], axis=2)
    b = np.concatenate([np.broadcast_to(decode("srgb", np.float32(0.6)), shape)] * 3 + [np.ones(shape)], axis=2)
    rgba = ("R", "G", "B", "A")
    got = measure(Image(a.astype(np.float32), rgba), Image(b.astype(np.float32), rgba))
    assert got["max_abs_srgb"] == pytest.approx(0.1, abs=1e-6)
    assert got["psnr_srgb_db"] == pytest.approx(20.0, abs=1e-4)
    same = measure(Image(a.astype(np.float32), rgba), Image(a.astype(np.float32), rgba))
    assert same["max_abs_srgb"] == 0.0 and math.isinf(same["psnr_srgb_db"])


# -- ground truth: the slow motion and the sweep, before and after ------------------------------
def _psnr_srgb(a: np.ndarray, b: np.ndarray) -> float:
    return _psnr(_srgb_encode(a), _srgb_encode(b))


def _rgb(path) -> np.ndarray:
    return _rgba(path)[..., :3].astype(np.float64)


@pytest.mark.slow
def test_slow_motion_inbetweens_are_closer_to_the_truth_after(demo):
    """The true in-betweens are the scene at the exact source time (scene.py renders any time).
    Interpolation protocol of Baker et al. (IJCV 2011): PSNR on sRGB-encoded values (IEC
    61966-2-1), with the cross-dissolve of the neighbours as the baseline.
    Measured (source frames 1011-1014, 3 in-betweens): before (retime.json) 32.0-33.9 dB, after
    (fg-retime-over.json) 37.9-38.4 dB, cross-dissolve 26.8-26.9 dB; mean abs error (linear)
    0.0020-0.0026 before, 0.0009 after. Asserted: after above 35 dB on every in-between and at
    least 2 dB above before; before above the dissolve."""
    out, _, _, summary = demo
    r = summary["retime"]
    first = FRAMES[0]
    frames = r["frames"]
    assert frames == list(range(first + 2 * (r["source_frames"][0] - first),
                                first + 2 * (r["source_frames"][1] - first) + 1))
    inbetweens = 0
    for k in frames:
        t = Fraction(first) + Fraction(k - first, 2)   # retime.json: first + (k - first) / slowdown
        truth = _rgb(out / "truth" / f"retime.{k:04d}.exr")
        before, after = _rgb(out / "retime" / f"before.{k:04d}.exr"), _rgb(out / "retime" / f"after.{k:04d}.exr")
        if t.denominator == 1:
            # whole source frames: retime.json passes the plate through bit for bit; fg-retime-over
            # rebuilds it from the cut-out over the clean plate (float rounding)
            plate = _rgb(out / "comp" / f"comp.{int(t):04d}.exr")
            np.testing.assert_array_equal(before, plate)
            np.testing.assert_allclose(after, plate, atol=1e-6)
            # and the truth at a whole frame is the composite's truth
            np.testing.assert_array_equal(truth, _rgb(out / "truth" / f"comp.{int(t):04d}.exr"))
            continue
        inbetweens += 1
        lo, hi = (_rgb(out / "comp" / f"comp.{f:04d}.exr") for f in (int(t), int(t) + 1))
        p_before, p_after, p_dissolve = (_psnr_srgb(x, truth) for x in (before, after, 0.5 * (lo + hi)))
        assert p_after > 35.0 and p_after > p_before + 2.0 and p_before > p_dissolve, (k, p_before, p_after)
        row = next(x for x in r["per_frame"] if x["frame"] == k)
        assert row["before"]["psnr_srgb_db"] == pytest.approx(p_before, abs=1e-6)
        assert row["after"]["psnr_srgb_db"] == pytest.approx(p_after, abs=1e-6)
    assert inbetweens == 3


@pytest.mark.slow
def test_sweep_is_closer_to_the_perfect_rig_after_clean_up(demo):
    """The truth is the perfect rig seen as the reference camera sees (Scene.render(..., like=)),
    the best a clean-up to that camera can reach; before and after are measured against the same
    picture over the central 80 % (align-views leaves an empty border). PSNR on sRGB values as in
    the interpolation protocol of Baker et al. (IJCV 2011); flicker is our own measure (mean jump
    of the log mean colour over the central 60 %, as in tests/cli/test_cli_rig_clean.py).
    Measured: in-between views 19.0-29.7 dB before (viewmorph.json on the raw cameras), 24.9-39.4
    dB after (rig-clean.json first), each view at least 5.8 dB better, pooled 20.8 and 29.7 dB;
    flicker 0.043 before, 0.0008 after, 0.0007 in the truth itself. Asserted: every in-between view at least 3 dB better after and
    above 23 dB; pooled after above 27 dB; flicker after below a tenth of before."""
    out, _, _, summary = demo
    w = summary["sweep"]
    frames, between, ref = w["frames"], w["between"], w["reference"]
    assert len(frames) == (w["cameras"] - 1) * (between + 1) + 1
    h0, w0 = round(HEIGHT * 0.1), round(WIDTH * 0.1)
    region = (slice(h0, HEIGHT - h0), slice(w0, WIDTH - w0))
    sq_after, seq = [], {"before": [], "after": [], "truth": []}
    for k in frames:
        truth = _rgb(out / "truth" / f"sweep.{k:04d}.exr")
        before, after = _rgb(out / "sweep" / f"before.{k:04d}.exr"), _rgb(out / "sweep" / f"after.{k:04d}.exr")
        for name, img in (("before", before), ("after", after), ("truth", truth)):
            seq[name].append(img[54:216, 96:384].reshape(-1, 3).mean(axis=0))  # the central 60 %
        if (k - 1) % (between + 1) == 0:
            continue  # a camera
        p_before, p_after = (_psnr_srgb(x[region], truth[region]) for x in (before, after))
        assert p_after > p_before + 3.0 and p_after > 23.0, (k, p_before, p_after)
        sq_after.append(float(np.mean((_srgb_encode(after[region]) - _srgb_encode(truth[region])) ** 2)))
    assert 10 * math.log10(1 / np.mean(sq_after)) > 27.0
    assert summary["sweep"]["inbetweens"]["after"]["pooled_psnr_srgb_db"] == pytest.approx(
        10 * math.log10(1 / np.mean(sq_after)), abs=1e-6)
    # the reference camera passes rig-clean and viewmorph unchanged, and is the truth's view up to
    # the half-float rounding of the rig's stills (IEEE 754 binary16: 2**-11 relative)
    k_ref = 1 + (ref - 1) * (between + 1)
    cam = _rgb(out / "rig" / f"cam.{ref:02d}.exr")
    np.testing.assert_array_equal(_rgb(out / "sweep" / f"after.{k_ref:04d}.exr"), cam)
    np.testing.assert_array_equal(_rgb(out / "sweep" / f"before.{k_ref:04d}.exr"), cam)
    truth = _rgb(out / "truth" / f"sweep.{k_ref:04d}.exr")
    assert np.all(np.abs(cam - truth) <= HALF_U * np.abs(truth) + 2.0 ** -24)
    flick = {name: float(np.mean(np.abs(np.diff(np.log(np.array(m)), axis=0)))) for name, m in seq.items()}
    assert flick["after"] < 0.1 * flick["before"], flick
    for name, value in flick.items():
        assert w["flicker"][name] == pytest.approx(value, rel=1e-9)


@pytest.mark.slow
def test_vector_pictures_follow_the_true_motion(demo):
    """The estimated vectors of the plate, pictured with the Baker et al. (2011) colour code, look
    like the true vectors pictured the same way (same code, same reference length). Measured on
    the two pairs: where the true picture is saturated (fast motion), the estimated picture
    differs by a mean 13-27 code values of 255, against 72-82 for a blank (white, no motion)
    picture; where nothing moves, by 1.3. Asserted: below half the blank picture's difference
    where things move, below 5 where nothing does."""
    out, _, _, summary = demo
    r = summary["retime"]
    for f in r["vector_pairs"]:
        est = cv2.imread(str(out / "vectors" / f"plate.{f:04d}.png"), cv2.IMREAD_COLOR).astype(np.float64)
        true = cv2.imread(str(out / "vectors" / f"plate-true.{f:04d}.png"), cv2.IMREAD_COLOR).astype(np.float64)
        assert est.shape == true.shape == (HEIGHT, WIDTH, 3)
        body = np.ones((HEIGHT, WIDTH), bool)
        body[:70, :70] = False                       # the legend in the corner
        saturation = 255 - true.min(axis=2)
        moving, still = (saturation > 60) & body, (saturation < 5) & body
        assert moving.mean() > 0.01 and still.mean() > 0.5
        assert np.abs(est - true)[moving].mean() < 0.5 * np.abs(255 - true)[moving].mean()
        assert np.abs(est - true)[still].mean() < 5
    for j in summary["sweep"]["vector_pairs"]:
        for kind in ("rig", "clean"):
            pic = cv2.imread(str(out / "vectors" / f"{kind}.{j:02d}.png"), cv2.IMREAD_COLOR)
            assert pic is not None and pic.shape == (HEIGHT, WIDTH, 3) and pic.std() > 5


# -- the page in a headless browser -------------------------------------------------------------
CHROMIUM = ("chromium", "chromium-browser")


def _chromium() -> str | None:
    import shutil

    for name in CHROMIUM:
        found = shutil.which(name)
        if found:
            return found
    return None


@pytest.mark.slow
def test_page_loads_in_a_headless_browser(demo, tmp_path):
    """Debian's Chromium loads index.html headless: the DOM holds the headings, the tables and the
    pictures, and the screenshot shows the contact sheet (its dark background) and the page."""
    out = demo[0]
    exe = _chromium()
    if exe is None:
        pytest.skip("Chromium is not installed, so the page was not loaded in a browser: install it "
                    "with `apt-get install chromium` (Debian; .ci/run does this before the tests)")
    url = (out / "index.html").as_uri()
    common = [exe, "--headless", "--disable-gpu", "--no-sandbox", "--hide-scrollbars",
              f"--user-data-dir={tmp_path / 'profile'}", "--window-size=1400,3000"]
    env = dict(os.environ, HOME=str(tmp_path))
    dom = subprocess.run([*common, "--dump-dom", url], capture_output=True, text=True, timeout=120, env=env)
    assert dom.returncode == 0, dom.stderr[-2000:]
    html = dom.stdout
    for heading in ("midframe demo: the paper fair", "The composite", "Slow motion: before and after",
                    "Sweep across the rig: before and after", "Contact sheet"):
        assert heading in html, heading
    parser = _Links()
    parser.feed(html)
    assert parser.tags.count("img") >= 1 + 4 + 4 and parser.tags.count("table") >= 3
    assert "contact_sheet.png" in parser.refs
    shot = tmp_path / "page.png"
    run = subprocess.run([*common, f"--screenshot={shot}", url], capture_output=True, text=True, timeout=120,
                         env=env)
    assert run.returncode == 0 and shot.is_file(), run.stderr[-2000:]
    img = cv2.imread(str(shot), cv2.IMREAD_COLOR)
    assert img is not None and img.shape[:2] == (3000, 1400)
    assert img.std() > 30                                   # not a blank page
    sheet_bg = np.all(np.abs(img.astype(int) - 32) <= 2, axis=2)
    assert sheet_bg.mean() > 0.02                           # the contact sheet image was drawn
    assert (img > 245).all(axis=2).mean() > 0.2             # and the page's white around it
