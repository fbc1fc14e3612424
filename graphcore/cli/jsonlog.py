"""``--log-format json``: one JSON object per line on standard error, for farm log scraping.

Every line has ``time`` (UTC, ISO 8601), ``level`` and ``event``:

- ``log``: a message of the engine's logger (``message``; ``logger``);
- ``frame``: a finished task of a render (``frame``, ``view``, ``node``, ``status`` ok, skipped,
  input-error or failure, ``seconds``, ``done``, ``total``, ``message`` when it failed);
- ``warning``: a graph or render warning (``message``, plus ``file`` / ``node`` / ``field`` / ``fix``
  where known);
- ``error``: the input error that stopped the command (``message``, ``file``, ``node``, ``field``,
  ``fix``, ``exit``), or an internal failure (``exit`` 1);
- ``summary``: the end of a render (``frames``, ``files``, ``skipped``, ``failed`` as a list of
  ``{frame, view, node, status, message}``, ``exit``).

The human-readable text format stays the default.
"""

from __future__ import annotations

import json
import logging
import sys
import time
from datetime import datetime, timezone
from typing import Any, TextIO

from graphcore.execute.plan import FrameResult

__all__ = ["JsonFormatter", "emit", "JsonProgress", "error_fields"]


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def emit(event: str, level: str = "info", stream: TextIO | None = None, **fields: Any) -> None:
    """Write one JSON line."""
    record = {"time": _now(), "level": level, "event": event, **fields}
    out = stream or sys.stderr
    out.write(json.dumps(record, default=str) + "\n")
    out.flush()


class JsonFormatter(logging.Formatter):
    """Log records as ``log`` events."""

    def format(self, record: logging.LogRecord) -> str:
        return json.dumps({"time": _now(), "level": record.levelname.lower(), "event": "log",
                           "logger": record.name, "message": record.getMessage()}, default=str)


def error_fields(exc: Any) -> dict[str, Any]:
    """The named parts of an InputError (file, node, field, fix) that are set."""
    out = {"message": getattr(exc, "message", str(exc))}
    for key, attr in (("file", "file"), ("node", "node_id"), ("field", "field"), ("fix", "fix")):
        value = getattr(exc, attr, None)
        if value:
            out[key] = value
    return out


class JsonProgress:
    """A render's progress as ``frame`` events."""

    def __init__(self, total: int, stream: TextIO | None = None) -> None:
        self.total = total
        self.stream = stream
        self.done = 0
        self.start = time.monotonic()

    def __call__(self, result: FrameResult) -> None:
        self.done += 1
        fields: dict[str, Any] = {"frame": result.frame, "view": result.view, "node": result.node_id,
                                  "status": result.status, "seconds": round(result.seconds, 4),
                                  "done": self.done, "total": self.total}
        if result.status not in ("ok", "skipped"):
            fields["message"] = result.message
        emit("frame", "info" if result.status in ("ok", "skipped") else "error", self.stream, **fields)
