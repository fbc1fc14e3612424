"""Sequence patterns: formatting, discovery on disk, gap reports."""

import os

import pytest

from graphcore.errors import OpError
from operators.io.sequence import (compact_ranges, contiguous_range, discover, format_path,
                                   is_sequence, missing_frames, parse)


@pytest.mark.parametrize("pattern, frame, expected", [
    ("plate.%04d.exr", 1001, "plate.1001.exr"),
    ("plate.%04d.exr", 7, "plate.0007.exr"),
    ("plate.%04d.exr", 12345, "plate.12345.exr"),
    ("plate.%04d.exr", -12, "plate.-012.exr"),   # printf: the width counts the sign
    ("plate.%d.exr", 7, "plate.7.exr"),
    ("plate.%d.exr", -7, "plate.-7.exr"),
    ("plate.####.exr", 42, "plate.0042.exr"),
    ("cam_#.png", 3, "cam_3.png"),
    ("100%%/f.%03d.png", 5, "100%/f.005.png"),
    ("still.exr", 99, "still.exr"),
])
def test_format_path(pattern, frame, expected):
    # Expected strings follow C printf "%0Nd" semantics (common practice for sequence names).
    assert format_path(pattern, frame) == expected


def test_printf_agreement():
    # Our %0Nd formatting equals Python's printf-style operator for many frames.
    for f in range(-120, 12000, 37):
        assert format_path("a.%05d.exr", f) == "a.%05d.exr" % f


def test_is_sequence_and_bad_patterns():
    assert is_sequence("a.%04d.exr") and is_sequence("a.#.exr") and is_sequence("a.%d.exr")
    assert not is_sequence("a.exr") and not is_sequence("100%%.exr")
    with pytest.raises(ValueError, match="more than one"):
        parse("a.%04d.%04d.exr")
    with pytest.raises(ValueError, match="lone"):
        parse("a.%4d.exr")
    with pytest.raises(ValueError):
        format_path("a.%04d.exr", 1.5)


def _touch(path):
    with open(path, "wb") as fh:
        fh.write(b"x")


def test_discover_accepts_only_names_the_pattern_makes(tmp_path):
    for f in (1001, 1002, 1003, 1005, 12345):
        _touch(tmp_path / f"p.{f:04d}.exr")
    _touch(tmp_path / "p.12.exr")       # too short for %04d
    _touch(tmp_path / "p.00012.exr")    # over-padded
    _touch(tmp_path / "p.1004.png")     # other extension
    _touch(tmp_path / "q.1004.exr")     # other prefix
    os.mkdir(tmp_path / "p.1006.exr")   # a folder, not a file
    assert discover(str(tmp_path / "p.%04d.exr")) == [1001, 1002, 1003, 1005, 12345]
    assert discover(str(tmp_path / "p.####.exr")) == [1001, 1002, 1003, 1005, 12345]
    assert discover(str(tmp_path / "p.%d.exr")) == [12, 1001, 1002, 1003, 1005, 12345]


def test_discover_negative_frames(tmp_path):
    for f in (-2, -1, 0, 1):
        _touch(tmp_path / format_path("n.%04d.exr", f))
    assert discover(str(tmp_path / "n.%04d.exr")) == [-2, -1, 0, 1]


def test_discover_still_and_special_characters(tmp_path):
    assert discover(str(tmp_path / "still.exr")) == []
    folder = tmp_path / "shot [v2]"
    folder.mkdir()
    _touch(folder / "f.0001.exr")
    assert discover(str(folder / "f.%04d.exr")) == [1]


def test_compact_ranges_and_missing():
    assert compact_ranges([1010, 1003, 1004, 1005]) == "1003-1005, 1010"
    assert compact_ranges([1, 2, 3]) == "1-3"
    assert compact_ranges([-3, -2, 5]) == "-3--2, 5"
    assert compact_ranges([]) == ""
    assert missing_frames([1001, 1002, 1006, 1009, 1011]) == [1003, 1004, 1005, 1007, 1008, 1010]


def test_contiguous_range(tmp_path):
    for f in range(1001, 1011):
        _touch(tmp_path / f"p.{f}.exr")
    assert contiguous_range(str(tmp_path / "p.%04d.exr")) == (1001, 1010)


def test_gap_error_lists_missing_frames(tmp_path):
    for f in (1001, 1002, 1006, 1007, 1008, 1009, 1011):
        _touch(tmp_path / f"p.{f}.exr")
    pattern = str(tmp_path / "p.%04d.exr")
    with pytest.raises(OpError) as info:
        contiguous_range(pattern)
    err = info.value
    assert "1003-1005, 1010" in err.message
    assert err.file == pattern and err.field == "path" and err.fix


def test_nothing_found_error(tmp_path):
    pattern = str(tmp_path / "none.%04d.exr")
    with pytest.raises(OpError) as info:
        contiguous_range(pattern, field="params.path")
    assert info.value.file == pattern and info.value.field == "params.path"
    assert "no files" in info.value.message
