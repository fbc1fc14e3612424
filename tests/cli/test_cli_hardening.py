"""Hardening end to end through the command line (in-process unless a real process limit is needed).

- NaN and infinite plate pixels through ``graphs/retime.json``: replaced by 0 with one warning per
  file naming it and the count; whole frames come back as the cleaned plate, bit for bit; no output
  value is NaN or infinite.
- A disk that fills while the OpenEXR library writes a frame, and a real write failure inside the
  library (a file-size limit, ``RLIMIT_FSIZE``): exit 2 naming the file with a fix about space, no
  partial or temporary file, the other frames intact.
- An output folder this process may not write into: refused before any frame renders, naming the
  folder; nothing written.
- Security: strings in graph files are never run; the disk cache never unpickles; operators come
  only from installed entry points or ``--plugin``; no spelling of a source plate's path (``..``,
  ``//``, ``./``, ``####``, a relative path, a symlinked folder or file, a hard link) lets ``write``
  replace it.
- Damaged frames inside whole renders (100 examples), plates with missing or odd channels through
  ``retime.json``, and absurd frame ranges (refused before the frame list is built).
- Sizes too large for memory: a resize beyond the image limit is refused before allocating; a
  MemoryError inside an operator is an input error naming the node, with what to do.
"""

from __future__ import annotations

import json
import os
import pickle
import resource
import signal
import subprocess
import sys

import numpy as np
import OpenEXR
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from operators.io.write import TEMP_PREFIX
from tests.cli.test_cli_retime import FIRST, picture, run_retime, sequence
from tests.cli.test_cli_run import cli, cli_proc, raw_channels, write_plate
from tests.conftest import GRAPHS, REPO, write_json


def convert(src: str, dst: str, *extra: str):
    return cli("run", str(GRAPHS / "convert.json"), "--set", f"src={src}", "--set", f"dst={dst}", "-q", *extra)


def temporaries(folder) -> list[str]:
    return sorted(p.name for p in folder.rglob(f"{TEMP_PREFIX}*"))


# -- NaN and infinite pixels through the retime template ------------------------------------------
def _poisoned_plates(folder) -> dict[int, int]:
    """Four float frames of the moving-square scene with NaN, +inf and -inf in R; returns the number
    of non-finite values put in each frame."""
    folder.mkdir(parents=True)
    counts = {}
    for i in range(4):
        planes = picture(i, np.float32)
        r = planes["R"].copy()
        if i == 0:
            r[0, 0] = -np.inf
        if i == 1:
            r[20:22, 30:32] = np.nan                        # inside the moving square's path
        if i == 2:
            r[5, 5], r[40, 60], r[10, 10] = np.inf, np.nan, -np.inf
        planes["R"] = r
        counts[FIRST + i] = int((~np.isfinite(r)).sum())
        write_plate(folder / f"sh.{FIRST + i:04d}.exr", planes)
    return counts


def test_nonfinite_plate_pixels_through_retime(tmp_path):
    counts = _poisoned_plates(tmp_path / "src")
    proc = cli_proc("run", str(GRAPHS / "retime.json"), "--set", f"src={tmp_path}/src/sh.%04d.exr", "--set",
                    f"dst={tmp_path}/out/o.%04d.exr", "--set", "slowdown=2", "-q")
    rc, err = proc.returncode, proc.stderr
    assert rc == 0, err
    for frame, n in counts.items():           # one warning per damaged file, with its count
        name = f"sh.{frame}.exr"
        if n:
            assert err.count(name) == 1, err
            assert f"{name}: {n} NaN/infinite pixel value(s) in channels R replaced by 0" in err
        else:
            assert name not in err
    outputs = sorted((tmp_path / "out").iterdir())
    assert [p.name for p in outputs] == [f"o.{k}.exr" for k in range(1001, 1008)]
    for p in outputs:
        for name, plane in raw_channels(p).items():
            assert np.isfinite(plane.astype(np.float32)).all(), (p.name, name)
    for j in range(4):                        # whole frames: the plate with its non-finite values at 0
        src = raw_channels(tmp_path / "src" / f"sh.{FIRST + j}.exr")
        out = raw_channels(tmp_path / "out" / f"o.{FIRST + 2 * j}.exr")
        for name, plane in src.items():
            np.testing.assert_array_equal(out[name], np.where(np.isfinite(plane), plane, 0).astype(plane.dtype))


def test_nonfinite_error_from_a_show_defaults_file_stops_naming_the_file(tmp_path):
    _poisoned_plates(tmp_path / "src")
    show = write_json(tmp_path / "show.json", {"schema": "midframe.defaults", "version": 1,
                                               "params": {"read": {"nonfinite": "error"}}})
    rc, _, err = run_retime(f"{tmp_path}/src/sh.%04d.exr", f"{tmp_path}/out/o.%04d.exr", "2",
                            "--defaults", str(show))
    assert rc == 2 and "Traceback" not in err
    assert "sh.1002.exr" in err and "field 'nonfinite'" in err and "4 NaN/infinite" in err
    assert not any(p.name.startswith("o.1003") for p in (tmp_path / "out").iterdir())  # its in-between failed


# -- a disk that fills, a write the OS refuses -----------------------------------------------------
def test_disk_full_inside_the_exr_library(tmp_path, monkeypatch):
    """The OpenEXR library reports a failed write as a RuntimeError whose text ends with the
    system's message (measured with a file-size limit: 'Failed to write pixel data to image file
    "...". File too large.'); here it runs out of space half way through frame 1003."""
    src = sequence(tmp_path / "src", 4, np.float32)
    real_file = OpenEXR.File

    class Writer:
        def __init__(self, path_or_header, *args, **kw):
            self.real = real_file(path_or_header, *args, **kw)
            self.writing = isinstance(path_or_header, dict)

        def __getattr__(self, name):
            return getattr(self.real, name)

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return self.real.__exit__(*exc)

        def write(self, path):
            if self.writing and path.endswith("o.1003.exr"):
                with open(path, "wb") as fh:
                    fh.write(b"v/1\x01" + b"\0" * 500)            # half a frame, then the disk is full
                raise RuntimeError(f'Failed to write pixel data to image file "{path}". No space left on device.')
            return self.real.write(path)

    monkeypatch.setattr(OpenEXR, "File", Writer)
    out = tmp_path / "out"
    rc, _, err = convert(src, f"{out}/o.%04d.exr")
    assert rc == 2 and "Traceback" not in err, err
    assert f"{out}/o.1003.exr" in err and "No space left on device" in err
    assert f"free space on the disk holding {out}" in err and "--resume" in err
    assert sorted(p.name for p in out.iterdir()) == ["o.1001.exr", "o.1002.exr", "o.1004.exr"]
    for k in (1001, 1002, 1004):                                   # the others are whole and right
        np.testing.assert_array_equal(raw_channels(out / f"o.{k}.exr")["R"], picture(k - FIRST, np.float32)["R"])


def _limit_file_size():
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)          # a write past the limit fails with EFBIG
    resource.setrlimit(resource.RLIMIT_FSIZE, (4096, resource.RLIM_INFINITY))


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_a_real_write_failure_in_the_library_is_an_input_error(tmp_path, jobs):
    """No simulation: the process (and its workers) may not write files over 4 KiB, so the OpenEXR
    library itself fails part way through each 48 x 64 float frame (about 60 KB)."""
    src = sequence(tmp_path / "src", 2, np.float32)
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "graphcore", "run", str(GRAPHS / "convert.json"), "--set",
                           f"src={src}", "--set", f"dst={out}/o.%04d.exr", "-q", "--jobs", jobs],
                          capture_output=True, text=True,
                          timeout=300, preexec_fn=_limit_file_size, cwd=tmp_path, check=False)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr, proc.stderr
    for k in (1001, 1002):
        assert f"{out}/o.{k}.exr" in proc.stderr
    assert "File too large" in proc.stderr and "free space on the disk holding" in proc.stderr
    assert list(out.iterdir()) == []                           # no partial frame, no temporary file


# -- an output folder that refuses writes ------------------------------------------------------------
def _deny_writes_under(monkeypatch, folder):
    """What os.access says for a folder of another user or a read-only mount (the tests run as
    root, for whom a mode bit does not stop writes)."""
    real = os.access

    def access(path, mode, *args, **kw):
        if str(path).startswith(str(folder)) and mode & os.W_OK:
            return False
        return real(path, mode, *args, **kw)

    monkeypatch.setattr(os, "access", access)


@pytest.mark.parametrize("below", ["", "new/deeper"])
def test_unwritable_output_folder_is_refused_before_rendering(tmp_path, monkeypatch, below):
    src = sequence(tmp_path / "src", 3, np.float32)
    locked = tmp_path / "locked"
    locked.mkdir()
    _deny_writes_under(monkeypatch, locked)
    calls = []
    import operators.io.exr as exr_module
    monkeypatch.setattr(exr_module, "read_exr", lambda *a, **k: calls.append(a) or pytest.fail("rendered"))
    dst = locked / below / "o.%04d.exr" if below else locked / "o.%04d.exr"
    rc, _, err = convert(src, str(dst))
    assert rc == 2 and "Traceback" not in err
    assert f"{locked}, node 'out', field 'nodes.out.params.path'" in err
    assert f"cannot write into the folder {locked}: permission denied" in err and "chmod u+w" in err
    assert calls == [] and list(locked.iterdir()) == []       # found before any frame: nothing read or written


def test_check_warns_about_an_unwritable_output_folder(tmp_path, monkeypatch):
    """A farm node may have other rights than the machine that checks: a warning, exit 0."""
    src = sequence(tmp_path / "src", 2, np.float32)
    _deny_writes_under(monkeypatch, tmp_path / "locked")
    (tmp_path / "locked").mkdir()
    rc, out, err = cli("check", str(GRAPHS / "convert.json"), "--set", f"src={src}", "--set",
                       f"dst={tmp_path}/locked/o.%04d.exr")
    assert rc == 0 and "valid" in out
    assert "warning" in err and f"cannot write into the folder {tmp_path}/locked" in err


def test_output_under_a_file_is_refused_before_rendering(tmp_path):
    src = sequence(tmp_path / "src", 2, np.float32)
    (tmp_path / "notes.txt").write_text("a file where a folder should be")
    rc, _, err = convert(src, f"{tmp_path}/notes.txt/out/o.%04d.exr")
    assert rc == 2 and "Traceback" not in err
    assert f"{tmp_path}/notes.txt is a file, not a folder" in err
    assert (tmp_path / "notes.txt").read_text() == "a file where a folder should be"


def test_read_only_mode_bits_for_a_user_without_root(tmp_path):
    """The same with a real chmod 0o555 folder, where the mode bits bind (not for root)."""
    if os.geteuid() == 0:
        pytest.skip("running as root, whom mode bits do not stop; the os.access tests above cover it")
    src = sequence(tmp_path / "src", 2, np.float32)
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        rc, _, err = convert(src, f"{locked}/o.%04d.exr")
    finally:
        locked.chmod(0o755)
    assert rc == 2 and f"cannot write into the folder {locked}" in err
    assert list(locked.iterdir()) == []


# -- security: graph files run no code --------------------------------------------------------------
def test_strings_in_a_graph_are_never_run(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    src = sequence(tmp_path / "src", 1, np.float32)
    marks = [tmp_path / f"MARK{i}" for i in range(4)]
    call = "__import__('os').system('touch MARK2')"          # relative names: the test runs in tmp_path
    tricky = f"$(touch MARK0)`touch MARK1`{call}{{0.__class__}}%(x)s"
    base = json.loads((GRAPHS / "convert.json").read_text())
    base["doc"] = "__import__('os').system('touch MARK3')"
    args = ["--set", f"src={src}", "--set", "dst=unused", "-q"]

    doc = json.loads(json.dumps(base))                       # an expression as a placeholder
    doc["nodes"]["out"]["params"]["path"] = "out/${" + call + "}.%04d.exr"
    rc, _, err = cli("run", str(write_json(tmp_path / "g.json", doc)), *args)
    assert rc == 2 and "malformed placeholder" in err and "node 'out'" in err

    doc = json.loads(json.dumps(base))                       # an expression as a variable's value
    doc["vars"]["note"] = {"type": "string", "default": f"${{{call}}}", "doc": "{0.__init__.__globals__}"}
    doc["nodes"]["out"]["params"]["path"] = "out/note-${note}.%04d.exr"
    rc, _, err = cli("run", str(write_json(tmp_path / "g.json", doc)), *args)
    assert rc == 0, err
    assert [p.name for p in (tmp_path / "out").iterdir()] == [f"note-${{{call}}}.1001.exr"]  # text, not code

    doc = json.loads(json.dumps(base))                       # shell, format and printf tricks
    doc["nodes"]["out"]["params"]["path"] = "out2/" + tricky.replace("%", "%%").replace("$", "$$") + ".%04d.exr"
    rc, _, err = cli("run", str(write_json(tmp_path / "g.json", doc)), *args)
    assert rc == 0, err
    assert [p.name for p in (tmp_path / "out2").iterdir()] == [tricky + ".1001.exr"]
    assert not any(m.exists() for m in marks)


def test_engine_source_has_no_way_to_run_text():
    """No eval, exec, pickle, marshal or shelve in the engine or the built-in operators; modules
    are imported only by the registry, from entry points and --plugin."""
    bad = ("eval(", "exec(", "import pickle", "pickle.", "import marshal", "import shelve", "__import__",
           "import_module", "allow_pickle=True", "yaml.load")
    found = []
    for folder in ("graphcore", "operators"):
        for path in sorted((REPO / folder).rglob("*.py")):
            for n, line in enumerate(path.read_text().splitlines(), 1):
                code = line.split("#")[0]
                found += [f"{path.relative_to(REPO)}:{n}: {word}" for word in bad if word in code]
    assert found == []


# -- security: the disk cache never unpickles -------------------------------------------------------
def test_cached_render_never_unpickles(tmp_path, monkeypatch):
    from graphcore.cache import DiskCache

    def refuse(*a, **k):
        raise AssertionError("pickle used")

    for name in ("load", "loads", "Unpickler"):
        monkeypatch.setattr(pickle, name, refuse)
    hits = []
    real_get = DiskCache.get

    def counting_get(self, key):
        value = real_get(self, key)
        hits.append(value is not None)
        return value

    monkeypatch.setattr(DiskCache, "get", counting_get)
    src = sequence(tmp_path / "src", 3, np.float32)
    cache = tmp_path / "cache"
    for run in ("first", "second"):
        rc, _, err = run_retime(src, f"{tmp_path}/{run}/o.%04d.exr", "2", "--cache", str(cache))
        assert rc == 0, err
    assert any(hits)                                           # the second render read disk entries
    for k in range(1001, 1006):
        a, b = raw_channels(tmp_path / "first" / f"o.{k}.exr"), raw_channels(tmp_path / "second" / f"o.{k}.exr")
        assert all(a[c].tobytes() == b[c].tobytes() for c in a)


# -- security: operators only from entry points or --plugin ----------------------------------------
PLUGIN = '''
import pathlib
pathlib.Path(__file__).with_name("IMPORTED").write_text("yes")
from tests.engine_ops import SCALE as OP
'''


@pytest.fixture
def marker_plugin(tmp_path, monkeypatch):
    """A module that leaves a file behind when imported and holds an Operator (test-scale)."""
    folder = tmp_path / "plugins"
    folder.mkdir()
    (folder / "marker_plugin.py").write_text(PLUGIN)
    monkeypatch.syspath_prepend(str(folder))
    sys.modules.pop("marker_plugin", None)
    yield folder / "IMPORTED"
    sys.modules.pop("marker_plugin", None)


def test_a_graph_cannot_name_a_module(tmp_path, marker_plugin):
    src = sequence(tmp_path / "src", 1, np.float32)
    for op in ("marker_plugin:OP", "marker_plugin.OP", "marker_plugin", "tests.engine_ops:SCALE"):
        doc = json.loads((GRAPHS / "convert.json").read_text())
        doc["nodes"]["mid"] = {"op": op, "params": {"factor": 2}, "inputs": {"image": "plate"}}
        doc["nodes"]["out"]["inputs"]["image"] = "mid"
        graph = write_json(tmp_path / "g.json", doc)
        rc, _, err = cli("check", str(graph), "--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr")
        assert rc == 2 and f"unknown operator '{op}'" in err and "node 'mid'" in err
    assert not marker_plugin.exists() and "marker_plugin" not in sys.modules


def test_a_defaults_file_cannot_name_a_plugin(tmp_path, marker_plugin):
    src = sequence(tmp_path / "src", 1, np.float32)
    show = write_json(tmp_path / "show.json", {"schema": "midframe.defaults", "version": 1,
                                               "plugins": ["marker_plugin:OP"]})
    rc, _, err = cli("check", str(GRAPHS / "convert.json"), "--defaults", str(show), "--set", f"src={src}",
                     "--set", f"dst={tmp_path}/o.%04d.exr")
    assert rc == 2 and "plugins" in err and str(show) in err
    assert not marker_plugin.exists()


def test_the_plugin_flag_is_the_explicit_way_in(tmp_path, marker_plugin):
    src = sequence(tmp_path / "src", 1, np.float32)
    doc = json.loads((GRAPHS / "convert.json").read_text())
    doc["nodes"]["mid"] = {"op": "test-scale", "params": {"factor": 2}, "inputs": {"image": "plate"}}
    doc["nodes"]["out"]["inputs"]["image"] = "mid"
    doc["nodes"]["out"]["params"]["pixel_type"] = "float"
    graph = write_json(tmp_path / "g.json", doc)
    args = ["--set", f"src={src}", "--set", f"dst={tmp_path}/o.%04d.exr"]
    rc, _, err = cli("run", str(graph), *args, "-q")
    assert rc == 2 and "unknown operator 'test-scale'" in err and not marker_plugin.exists()
    rc, _, err = cli("run", str(graph), *args, "-q", "--plugin", "marker_plugin:OP")
    assert rc == 0, err
    assert marker_plugin.exists()
    out = raw_channels(tmp_path / "o.1001.exr")["R"]
    np.testing.assert_array_equal(out, 2 * picture(0, np.float32)["R"])


# -- security: no spelling of a source path lets write replace it ------------------------------------
SPELLINGS = ["dotdot", "double-slash", "dot", "hashes", "relative", "symlinked-folder", "symlinked-files",
             "hard-links"]


@pytest.mark.parametrize("spelling", SPELLINGS)
def test_no_spelling_of_a_source_path_lets_write_replace_it(tmp_path, monkeypatch, spelling):
    src_dir = tmp_path / "src"
    src = sequence(src_dir, 2, np.float32)
    before = {p.name: p.read_bytes() for p in src_dir.iterdir()}
    monkeypatch.chdir(tmp_path)
    if spelling == "dotdot":
        dst = f"{src_dir}/../src/sh.%04d.exr"
    elif spelling == "double-slash":
        dst = f"{src_dir}//sh.%04d.exr"
    elif spelling == "dot":
        dst = f"{src_dir}/./sh.%04d.exr"
    elif spelling == "hashes":
        dst = f"{src_dir}/sh.####.exr"
    elif spelling == "relative":
        dst = "src/sh.%04d.exr"
    elif spelling == "symlinked-folder":
        os.symlink(src_dir, tmp_path / "alias")
        dst = f"{tmp_path}/alias/sh.%04d.exr"
    else:
        links = tmp_path / "links"
        links.mkdir()
        for name in before:
            (os.symlink if spelling == "symlinked-files" else os.link)(src_dir / name, links / name)
        dst = f"{links}/sh.%04d.exr"
    rc, _, err = convert(src, dst)
    assert rc == 2 and "Traceback" not in err
    assert "would overwrite source plate" in err and "node 'out'" in err
    assert {p.name: p.read_bytes() for p in src_dir.iterdir()} == before
    assert temporaries(tmp_path) == []


def test_write_itself_refuses_a_hard_link_to_what_it_reads(tmp_path):
    """The write operator's own guard (used when a graph is evaluated without the planner)."""
    from graphcore.errors import OpError
    from graphcore.image import Image
    from graphcore.sample import Sample
    from operators.io.write import WRITE, WriteParams
    from tests.operators.conftest import op_context

    plate = tmp_path / "p.0001.exr"
    write_plate(plate, picture(0, np.float32))
    os.link(plate, tmp_path / "q.0001.exr")
    before = plate.read_bytes()
    img = Image(np.zeros((2, 2, 3), np.float32), ("R", "G", "B"))
    with pytest.raises(OpError) as info:
        WRITE.compute(WriteParams(path=str(tmp_path / "q.%04d.exr")), {"image": img},
                      op_context(Sample(1), sources=(str(plate),)))
    assert info.value.field == "path" and "source plate" in info.value.message
    assert plate.read_bytes() == before


# -- damaged and odd plates through whole renders --------------------------------------------------
@settings(max_examples=100, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(changes=st.lists(st.tuples(st.integers(0, 1 << 20), st.integers(1, 255)), max_size=6),
       cut=st.one_of(st.none(), st.floats(0, 1, exclude_max=True)))
def test_a_damaged_frame_fails_alone_in_a_render(tmp_path_factory, changes, cut):
    """One damaged frame (bytes flipped and/or cut short) in a three-frame convert: exit 0 (the damage
    left a readable image) or 2 naming that file; the other frames are written; no temporary file.
    tests/operators/test_io_fuzz.py runs the reader alone on thousands of damaged files."""
    tmp_path = tmp_path_factory.mktemp("damaged")
    src = sequence(tmp_path / "src", 3, np.float32)
    bad = tmp_path / "src" / "sh.1002.exr"
    data = bytearray(bad.read_bytes())
    for pos, xor in changes:
        data[pos % len(data)] ^= xor
    if cut is not None:
        data = data[: int(cut * len(data))]
    bad.write_bytes(bytes(data))
    out = tmp_path / "out"
    rc, _, err = convert(src, f"{out}/o.%04d.exr")
    assert rc in (0, 2) and "Traceback" not in err, err
    written = sorted(p.name for p in out.iterdir())
    if rc == 2:
        assert str(bad) in err and "frame(s) 1002" in err
        assert written == ["o.1001.exr", "o.1003.exr"]
    else:
        assert written == ["o.1001.exr", "o.1002.exr", "o.1003.exr"]
    assert cut is None or rc == 2                       # a file cut short is never taken for an image
    event(f"exit {rc}")


@pytest.mark.parametrize("channels", [["Y"], ["A"], ["Z"], ["fwd.x"], ["R", "G"], ["Y", "RY", "BY"],
                                      ["R", "G", "B"]])
def test_plates_with_missing_or_odd_channels_through_retime(tmp_path, channels):
    """Exit 0 with the plate's channels written, or 2 naming the node and field; never a traceback.
    (One channel is matched as grey; two channels or luma/chroma layers have no R G B to match on.)"""
    rng = np.random.default_rng(4)
    src = tmp_path / "src"
    src.mkdir()
    for f in range(1001, 1004):
        write_plate(src / f"p.{f}.exr", {c: rng.random((24, 32)).astype(np.float32) for c in channels})
    rc, _, err = run_retime(f"{src}/p.%04d.exr", f"{tmp_path}/out/o.%04d.exr", "2")
    assert rc in (0, 2) and "Traceback" not in err, err
    if rc == 2:
        assert "node 'vectors', field 'channels'" in err and "no R G B channels to match on" in err
        assert len(channels) > 1
    else:
        assert sorted(raw_channels(tmp_path / "out" / "o.1002.exr")) == sorted(channels)


def _limit_memory():
    resource.setrlimit(resource.RLIMIT_AS, (3 << 30, resource.RLIM_INFINITY))


@pytest.mark.parametrize("args, words", [
    (["--set", "slowdown=1e9"], "(2000000001 frames), more than the 1000000 one render may span"),
    (["--set", "slowdown=2", "--frames", "1-100000000000"], "spans 100000000000 frames"),
])
def test_an_absurd_frame_range_is_refused_before_listing_it(tmp_path, args, words):
    """A slowdown of 1e9 on a three-frame plate asked for 2e9 output frames; listing them exhausted
    memory (MemoryError and a traceback under a 4 GB limit, measured). Run under a 3 GiB address
    space limit so a regression fails instead of hurting the machine."""
    src = sequence(tmp_path / "src", 3, np.float32)
    proc = subprocess.run([sys.executable, "-m", "graphcore", "run", str(GRAPHS / "retime.json"), "--set",
                           f"src={src}", "--set", f"dst={tmp_path}/out/o.%04d.exr", *args, "-q"],
                          capture_output=True, text=True, timeout=300, preexec_fn=_limit_memory, check=False)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr, proc.stderr
    assert words in proc.stderr
    assert not (tmp_path / "out").exists()


# -- sizes too large for memory ------------------------------------------------------------------------
def _with_resize(tmp_path, src: str, params: dict):
    doc = json.loads((GRAPHS / "convert.json").read_text())
    doc["nodes"]["big"] = {"op": "resize", "params": params, "inputs": {"image": "plate"}}
    doc["nodes"]["out"]["inputs"]["image"] = "big"
    return write_json(tmp_path / "g.json", doc)


@pytest.mark.parametrize("params, field", [({"width": 65536, "height": 65536}, "width"), ({"scale": 1000}, "scale")])
def test_a_resize_beyond_memory_is_refused_before_allocating(tmp_path, params, field):
    """64 x 48 with five channels to 65536 x 65536 needs 160 GiB (80 GiB resampled, 80 GiB placed):
    refused by node and field. Under a 3 GiB address-space limit, so a regression fails instead of
    filling the machine's memory."""
    src = sequence(tmp_path / "src", 1, np.float32)
    graph = _with_resize(tmp_path, src, params)
    proc = subprocess.run([sys.executable, "-m", "graphcore", "run", str(graph), "--set", f"src={src}", "--set",
                           f"dst={tmp_path}/out/o.%04d.exr", "-q"], capture_output=True, text=True, timeout=300,
                          preexec_fn=_limit_memory, check=False)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr, proc.stderr
    assert f"node 'big', field '{field}'" in proc.stderr and "GiB midframe allows for one image" in proc.stderr
    assert "MIDFRAME_MAX_IMAGE_MB" in proc.stderr
    assert not (tmp_path / "out").exists()


def test_running_out_of_memory_in_an_operator_is_an_input_error(tmp_path, monkeypatch):
    """A MemoryError inside compute (here raised by the resampler) names the node and what to do."""
    import operators.transform.resize as resize_module

    def no_memory(*args, **kw):
        raise MemoryError("Unable to allocate 12.0 GiB for an array")

    monkeypatch.setattr(resize_module, "_resample", no_memory)
    src = sequence(tmp_path / "src", 2, np.float32)
    graph = _with_resize(tmp_path, src, {"width": 32, "height": 24})
    rc, _, err = cli("run", str(graph), "--set", f"src={src}", "--set", f"dst={tmp_path}/out/o.%04d.exr", "-q")
    assert rc == 2 and "Traceback" not in err
    assert f"{graph}, node 'big': ran out of memory at frame 1001" in err and "fewer --jobs" in err


# -- midframe vectors: the same rules ------------------------------------------------------------------
def test_vectors_command_treats_nonfinite_pixels_like_read(tmp_path):
    from graphcore.image import Image
    from operators.io.exr import write_exr

    rng = np.random.default_rng(5)
    for name, (nan, inf) in {"a": (9, 1), "b": (0, 2)}.items():
        px = rng.random((32, 40, 3)).astype(np.float32)
        px[3:6, 3:6, 0] = np.nan if nan else px[3:6, 3:6, 0]
        px[10, 10:10 + inf, 1] = np.inf
        write_exr(str(tmp_path / f"{name}.exr"), Image(px, ("R", "G", "B")), default_pixel_type="float")
    proc = cli_proc("vectors", str(tmp_path / "a.exr"), str(tmp_path / "b.exr"), "--out", str(tmp_path / "v.exr"))
    assert proc.returncode == 0, proc.stderr
    assert f"{tmp_path}/a.exr: 10 NaN/infinite pixel value(s) in channels R, G replaced by 0" in proc.stderr
    assert f"{tmp_path}/b.exr: 2 NaN/infinite pixel value(s) in channels G replaced by 0" in proc.stderr
    assert all(np.isfinite(v).all() for v in raw_channels(tmp_path / "v.exr").values())


def test_vectors_command_cannot_write_under_a_file(tmp_path):
    src = sequence(tmp_path / "src", 2, np.float32)
    (tmp_path / "taken").write_text("a file")
    rc, _, err = cli("vectors", src % 1001, src % 1002, "--out", f"{tmp_path}/taken/v.exr")
    assert rc == 2 and "Traceback" not in err
    assert f"{tmp_path}/taken/v.exr, field '--out': cannot write the file" in err and "a file stands where" in err


@pytest.mark.parametrize("args, words", [
    (["graph", str(GRAPHS / "over.json"), "--out", "{tmp}/taken/g.dot"], "a file stands where a folder"),
    (["schema", "--out", "{tmp}/missing/s.json"], "create the folder {tmp}/missing first"),
])
def test_other_commands_cannot_write_their_out_file(tmp_path, args, words):
    (tmp_path / "taken").write_text("a file")
    rc, _, err = cli(*[a.format(tmp=tmp_path) for a in args])
    assert rc == 2 and "Traceback" not in err
    assert "field '--out': cannot write the file" in err and words.format(tmp=tmp_path) in err


def test_a_full_disk_under_the_cache_does_not_stop_the_render(tmp_path, monkeypatch, caplog):
    """The disk cache only saves work: when storing an entry fails half way (the disk is full) the
    render goes on with the same pixels, one warning names the cache folder, and no temporary or
    partial entry is left behind."""
    import errno

    real_write_array = np.lib.format.write_array

    def full(fh, array, *args, **kw):
        fh.write(b"\x93NUMPY" + b"\0" * 64)
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    src = sequence(tmp_path / "src", 3, np.float32)
    rc, _, err = run_retime(src, f"{tmp_path}/plain/o.%04d.exr", "2")
    assert rc == 0, err
    monkeypatch.setattr(np.lib.format, "write_array", full)
    cache = tmp_path / "cache"
    with caplog.at_level("WARNING"):
        rc, _, err = run_retime(src, f"{tmp_path}/cached/o.%04d.exr", "2", "--cache", str(cache))
    monkeypatch.setattr(np.lib.format, "write_array", real_write_array)
    assert rc == 0, err
    warnings = [r.getMessage() for r in caplog.records if "disk cache" in r.getMessage()]
    assert len(warnings) == 1 and str(cache) in warnings[0] and "No space left on device" in warnings[0]
    assert [p for p in cache.rglob("*") if p.is_file()] == []
    for k in range(1001, 1006):
        a, b = raw_channels(tmp_path / "plain" / f"o.{k}.exr"), raw_channels(tmp_path / "cached" / f"o.{k}.exr")
        assert all(a[c].tobytes() == b[c].tobytes() for c in a)
