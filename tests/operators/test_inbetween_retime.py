"""Tests of ``retime`` (operators/inbetween/retime.py) and its exact time arithmetic.

Frame-rate conversion is checked against values worked by hand from the definition
s(k) = first + (k - first) * from_rate / to_rate, with the NTSC-family rates as the exact rationals
24000/1001, 30000/1001, 60000/1001 (SMPTE ST 12-1; the decimal labels 23.976, 29.97, 59.94 are
common practice). The smooth time curve is checked against SciPy's PchipInterpolator (a reference
implementation of the same monotone cubic, Fritsch & Carlson 1980 / Fritsch & Butland 1984).
"""

from __future__ import annotations

from fractions import Fraction as F

import numpy as np
import pydantic
import pytest

from graphcore.errors import OpError
from graphcore.registry.operator import FrameRange
from graphcore.sample import Sample
from operators.inbetween._timing import parse_rate, pchip_slopes, smooth_curve
from operators.inbetween.retime import RETIME, RetimeParams, output_range, retime_needs, source_time
from tests.conftest import noise_image
from tests.operators.conftest import run_op


def rate(from_rate, to_rate, first=1001):
    return RetimeParams(mode="rate", from_rate=from_rate, to_rate=to_rate, first=first)


# -- rates -----------------------------------------------------------------------------------------
@pytest.mark.parametrize("text, exact", [
    ("23.976", F(24000, 1001)), (23.976, F(24000, 1001)), ("23.98", F(24000, 1001)),
    ("29.97", F(30000, 1001)), ("59.94", F(60000, 1001)),      # SMPTE ST 12-1 rates
    ("24000/1001", F(24000, 1001)), (24, F(24)), ("25", F(25)), (50.0, F(50)), ("30", F(30)),
])
def test_rates_are_exact_rationals(text, exact):
    assert parse_rate(text) == exact


@pytest.mark.parametrize("k, expected", [
    # 24 -> 30, worked by hand: s = 1001 + (k - 1001) * 24/30 = 1001 + (k - 1001) * 4/5
    (1001, F(1001)), (1002, 1001 + F(4, 5)), (1003, 1002 + F(3, 5)), (1004, 1003 + F(2, 5)),
    (1005, 1004 + F(1, 5)), (1006, F(1005)), (1011, F(1009)),
])
def test_24_to_30_source_times(k, expected):
    p = rate(24, 30)
    assert source_time(p, k) == expected
    assert retime_needs(p, Sample(k)) == {"image": Sample(expected)}


@pytest.mark.parametrize("k, expected", [
    # 23.976 -> 25, worked by hand: from/to = (24000/1001)/25 = 960/1001, so
    # s = 1001 + (k - 1001) * 960/1001; one second of output (k = 1026) is 24000/1001 = 23 977/1001
    # source frames on.
    (1001, F(1001)), (1002, 1001 + F(960, 1001)), (1003, 1002 + F(919, 1001)),
    (1026, 1024 + F(977, 1001)),
])
def test_23_976_to_25_source_times(k, expected):
    assert source_time(rate("23.976", 25), k) == expected
    assert source_time(rate("24000/1001", "25"), k) == expected


def test_rate_output_ranges_worked_by_hand():
    # 24 -> 30 over source 1001-1005 (4 frames on): 4 * 30/24 = 5 -> outputs 1001-1006.
    assert output_range(rate(24, 30), FrameRange(1001, 1005)) == FrameRange(1001, 1006)
    # 23.976 -> 25 over 1001-1025: 24 * 25 * 1001 / 24000 = 25.025 -> floor 25 -> 1001-1026.
    assert output_range(rate("23.976", 25), FrameRange(1001, 1025)) == FrameRange(1001, 1026)


# -- slow-down -------------------------------------------------------------------------------------
def test_slowdown_design_mapping_and_range():
    """design.md: output frame k shows first + (k - first) / slowdown, numbered from first."""
    p = RetimeParams(slowdown=2.5, first=1001)
    assert p == RetimeParams(slowdown="5/2", first=1001)          # same params, same cache key
    assert [source_time(p, k) for k in (1001, 1002, 1003, 1006, 1008)] == [
        F(1001), 1001 + F(2, 5), 1001 + F(4, 5), F(1003), 1003 + F(4, 5)]
    assert output_range(p, FrameRange(1001, 1004)) == FrameRange(1001, 1008)   # 3 * 2.5 = 7.5
    fast = RetimeParams(slowdown=0.5, first=1)
    assert [source_time(fast, k) for k in (1, 2, 3)] == [1, 3, 5]
    assert output_range(fast, FrameRange(1, 10)) == FrameRange(1, 5)


def test_integer_source_time_passes_through_bit_for_bit():
    img = noise_image(5, 6, seed=3)
    out = run_op(RETIME, RetimeParams(slowdown=2, first=1001), {"image": img}, sample=Sample(1003))
    assert out is img


def test_one_frame_sequence():
    p = RetimeParams(slowdown=3, first=7)
    assert RETIME.frames(p, {"image": FrameRange(7, 7)}) == FrameRange(7, 7)
    assert retime_needs(p, Sample(7)) == {"image": Sample(7)}


# -- curves ----------------------------------------------------------------------------------------
KEYS = [[1001, 1001], [1005, 1003], [1009, 1003], [1013, "2011/2"]]   # a hold from 1005 to 1009


def test_linear_curve_with_hold():
    p = RetimeParams(mode="curve", keys=KEYS)
    assert [source_time(p, k) for k in (1001, 1003, 1005, 1007, 1009, 1011, 1013)] == [
        1001, 1002, 1003, 1003, 1003, 1003 + F(5, 4), F(2011, 2)]
    assert output_range(p, FrameRange(1001, 1010)) == FrameRange(1001, 1013)
    assert source_time(p, 990) == 1001 and source_time(p, 1100) == F(2011, 2)   # flat beyond


def test_smooth_curve_holds_and_never_overshoots():
    p = RetimeParams(mode="curve", keys=KEYS, interpolation="smooth")
    times = [source_time(p, k) for k in range(1001, 1014)]
    assert all(isinstance(s, F) for s in times)
    assert times[4:9] == [F(1003)] * 5                               # the hold stays flat
    assert all(b >= a for a, b in zip(times, times[1:]))            # monotone: no overshoot
    assert times[0] == 1001 and times[-1] == F(2011, 2)


def test_smooth_curve_matches_scipy_pchip():
    """SciPy's PchipInterpolator (reference implementation of the same interpolant)."""
    interpolate = pytest.importorskip("scipy.interpolate")
    xs = [F(x) for x in (0, 3, 4, 10, 12, 20)]
    ys = [F(y) for y in (0, 2, F(5, 2), 6, 6, 9)]
    ref = interpolate.PchipInterpolator([float(x) for x in xs], [float(y) for y in ys])
    m = pchip_slopes(xs, ys)
    for x in np.linspace(0, 20, 81):
        q = F(x).limit_denominator(1000)
        assert float(smooth_curve(xs, ys, q, m)) == pytest.approx(float(ref(float(q))), abs=1e-9)


def test_curve_out_of_range_error_names_the_key():
    p = RetimeParams(mode="curve", keys=[[1, 1], [9, 12]])
    with pytest.raises(OpError) as err:
        RETIME.frames(p, {"image": FrameRange(1, 10)})
    assert err.value.field == "keys" and "key 1" in str(err.value) and "hold" in err.value.fix


def test_curve_out_of_range_hold_clamps():
    p = RetimeParams(mode="curve", keys=[[1, 0], [9, 12]], out_of_range="hold", first=1, last=10)
    assert RETIME.frames(p, {"image": FrameRange(1, 10)}) == FrameRange(1, 9)
    assert retime_needs(p, Sample(1)) == {"image": Sample(1)}     # 0 held at first
    assert retime_needs(p, Sample(9)) == {"image": Sample(10)}    # 12 held at last
    assert retime_needs(p, Sample(3)) == {"image": Sample(3)}     # 0 + 2 * 12/8 = 3


def test_source_time_outside_the_input_arrives_as_none_and_is_a_clear_error():
    with pytest.raises(OpError) as err:
        run_op(RETIME, RetimeParams(slowdown=2, first=1), {"image": None}, sample=Sample(40))
    assert "source time" in str(err.value) and err.value.fix


# -- bad input -------------------------------------------------------------------------------------
@pytest.mark.parametrize("kwargs, words", [
    ({"slowdown": 0, "first": 1}, "greater than 0"),
    ({"slowdown": -2, "first": 1}, "greater than 0"),
    ({"slowdown": "fast", "first": 1}, "not a number"),
    ({"slowdown": float("nan"), "first": 1}, "finite"),
    ({"mode": "rate", "from_rate": 24, "first": 1}, "to_rate"),
    ({"mode": "rate", "from_rate": 24, "to_rate": 0, "first": 1}, "greater than 0"),
    ({"mode": "curve"}, "needs 'keys'"),
    ({"mode": "curve", "keys": [[5, 1], [5, 2]]}, "does not come after"),
    ({"mode": "curve", "keys": [[5, 1, 3]]}, "[output_frame, source_time]"),
    ({"mode": "curve", "keys": [[1.5, 1]]}, "whole number"),
])
def test_bad_params_are_refused_with_a_reason(kwargs, words):
    with pytest.raises(pydantic.ValidationError) as err:
        RetimeParams(**kwargs)
    assert words in str(err.value)


def test_first_that_is_not_the_source_first_names_the_right_value():
    with pytest.raises(OpError) as err:
        RETIME.frames(RetimeParams(slowdown=2, first=1001), {"image": FrameRange(1, 4)})
    assert err.value.field == "first" and "set first to 1" in err.value.fix


def test_first_and_last_default_to_the_input_range():
    """The engine hands retime its input's frames (needs_ranges): no 'first' param needed."""
    from graphcore.registry import InputRange

    p = RetimeParams(slowdown=2)
    ranges = {"image": InputRange(FrameRange(7, 10), None)}
    assert retime_needs(p, Sample(8), ranges) == {"image": Sample(F(15, 2))}
    hold = RetimeParams(mode="curve", keys=[[1, 5], [3, 12]], out_of_range="hold")
    assert retime_needs(hold, Sample(3), ranges) == {"image": Sample(10)}  # clamped to the input's last
    with pytest.raises(OpError):
        retime_needs(p, Sample(8), {"image": InputRange(None, None)})  # nothing to number from


def test_declaration():
    assert RETIME.name == "retime" and [p.name for p in RETIME.inputs] == ["image"]
    assert RETIME.edge_samples and RETIME.frames is not None


def test_shutter_times_worked_by_hand():
    """Speed-up x4 (slowdown 1/4) with a 180-degree shutter (common practice): the output frame spans
    4 source frames, the plate's own blur covers one, so 180/360 * (4 - 1) = 3/2 source frames are
    sampled, 4 midpoints of equal slices centred on the source time (worked by hand)."""
    from operators.inbetween.retime import shutter_times

    p = RetimeParams(slowdown="1/4", shutter=180, shutter_samples=4)
    # output 1003 shows source 1001 + 2 * 4 = 1009; slices of 3/8 centred on it
    assert shutter_times(p, 1003, 1001, 1100) == (F(1009) - F(3, 4) + F(3, 16), F(1009) - F(3, 16),
                                                    F(1009) + F(3, 16), F(1009) + F(3, 4) - F(3, 16))
    assert shutter_times(p, 1001, 1001, 1100)[0] == 1001  # clamped to the source's first frame
    assert shutter_times(RetimeParams(slowdown=2, shutter=180), 1003, 1001, 1100) == (F(1002),)  # slow-down
    assert shutter_times(RetimeParams(slowdown="1/4"), 1003, 1001, 1100) == (F(1009),)  # shutter off


def test_shutter_blur_averages_the_inbetweens():
    import numpy as np

    from graphcore.image import Image
    from graphcore.registry import InputRange
    from tests.operators.conftest import op_context

    p = RetimeParams(slowdown="1/3", shutter=360, shutter_samples=2)
    asked = retime_needs(p, Sample(1002), {"image": InputRange(FrameRange(1001, 1020), None)})
    assert asked == {"image": (Sample(F(1004) - F(1, 2)), Sample(F(1004) + F(1, 2)))}
    a = Image(np.zeros((2, 2, 1), np.float32), ("Y",))
    b = Image(np.ones((2, 2, 1), np.float32), ("Y",))
    out = RETIME.compute(p, {"image": (a, b)}, op_context(Sample(1002)))
    assert np.all(out.pixels == 0.5)
