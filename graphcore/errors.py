"""Error types. Errors are data: they carry the file, node, field and fix as attributes.

``InputError`` and its subclasses are the user's to fix (exit status 2, no traceback);
anything else escaping the engine is an internal failure (exit status 1).
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = ["MidframeError", "InputError", "GraphError", "GraphErrors", "OpError"]


class MidframeError(Exception):
    """Base of all errors the engine raises on purpose."""


class InputError(MidframeError):
    """Invalid input: graph, params, variables or files. Exit status 2.

    Attributes
    ----------
    file : str or None
        The file at fault (graph file, image file, defaults file).
    node_id : str or None
        The graph node concerned.
    field : str or None
        JSON path of the offending value, e.g. ``nodes.plate.params.path``, or a param name.
    fix : str or None
        What would fix it, in a sentence.
    """

    def __init__(self, message: str, *, file: str | None = None, node_id: str | None = None,
                 field: str | None = None, fix: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.file = file
        self.node_id = node_id
        self.field = field
        self.fix = fix

    def describe(self) -> str:
        """One human-readable block: where, what, and how to fix it."""
        where = []
        if self.file:
            where.append(str(self.file))
        if self.node_id:
            where.append(f"node '{self.node_id}'")
        if self.field:
            where.append(f"field '{self.field}'")
        head = ": ".join([", ".join(where), self.message]) if where else self.message
        if self.fix:
            head += f"\n    fix: {self.fix}"
        return head

    def __str__(self) -> str:
        return self.describe()


class GraphError(InputError):
    """One problem found in a graph file (or its variables / defaults)."""


class GraphErrors(InputError):
    """Every problem found in one validation pass, reported together."""

    def __init__(self, errors: Iterable[GraphError], *, file: str | None = None) -> None:
        self.errors = list(errors)
        n = len(self.errors)
        super().__init__(f"{n} problem{'s' if n != 1 else ''} found", file=file)

    def describe(self) -> str:
        lines = [f"{self.file or 'graph'}: {self.message}"]
        lines += ["  - " + e.describe().replace("\n", "\n    ") for e in self.errors]
        return "\n".join(lines)


class OpError(InputError):
    """Raised by an operator's compute when its inputs or files are unusable.

    The evaluator fills in ``node_id`` and the graph ``file`` when they are not set, so operators
    only name the param (``field``), the image ``file`` if any, and the ``fix``.
    """
