"""Progress reporting: a bar with counts and time left on a terminal, plain log lines otherwise."""

from __future__ import annotations

import sys
import time
from typing import TextIO

from graphcore.execute.plan import FrameResult

__all__ = ["Progress"]


def _fmt(seconds: float) -> str:
    seconds = max(0, int(round(seconds)))
    h, rem = divmod(seconds, 3600)
    m, s = divmod(rem, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class Progress:
    """Call with each ``FrameResult``; draws on a terminal, logs one line per frame elsewhere."""

    def __init__(self, total: int, stream: TextIO | None = None, *, tty: bool | None = None,
                 quiet: bool = False) -> None:
        self.total = total
        self.stream = stream or sys.stderr
        self.tty = self.stream.isatty() if tty is None else tty
        self.quiet = quiet
        self.done = 0
        self.failed = 0
        self.start = time.monotonic()

    def __call__(self, result: FrameResult) -> None:
        self.done += 1
        if result.status != "ok":
            self.failed += 1
        if self.quiet:
            return
        elapsed = time.monotonic() - self.start
        left = elapsed / self.done * (self.total - self.done) if self.done else 0.0
        if self.tty:
            width = 30
            filled = int(width * self.done / max(1, self.total))
            bar = "#" * filled + "-" * (width - filled)
            fail = f" {self.failed} failed" if self.failed else ""
            self.stream.write(f"\r[{bar}] {self.done}/{self.total} frames{fail}  "
                              f"elapsed {_fmt(elapsed)}  left {_fmt(left)} ")
            if self.done == self.total:
                self.stream.write("\n")
        else:
            status = "ok" if result.status == "ok" else f"FAILED ({result.status})"
            self.stream.write(f"midframe: {result.where} node {result.node_id} {status} "
                              f"{result.seconds:.2f}s [{self.done}/{self.total}, left {_fmt(left)}]\n")
        self.stream.flush()
