"""The project's exceptions, all rooted in :class:`AuditorError`.

::

    AuditorError                  anything the auditor raises on purpose
    ├── InputError                bad user input; the CLI exits with code 2
    │   ├── MetricFileError       a metric file that cannot be read or is malformed
    │   │   └── ExpressionError   an expression string outside the safe language
    │   ├── UsageError            bad command-line usage (--at, --set, --vary ...)
    │   └── PointError            an event that cannot be audited (singular,
    │                             degenerate, not Lorentzian)
    ├── NoAuditablePointError     a region in which every point was excluded
    │                             (also exit code 2)
    └── ReportError               the report could not be drawn or rendered
                                  (PDF stack, templates; exit code 2)

Library errors (SymPy, SciPy, WeasyPrint, OS errors) are translated at the
boundary with ``raise ... from`` so that the CLI prints one line and never a
traceback.
"""

from __future__ import annotations

__all__ = [
    "AuditorError",
    "InputError",
    "MetricFileError",
    "ExpressionError",
    "UsageError",
    "PointError",
    "NoAuditablePointError",
    "ReportError",
]


class AuditorError(Exception):
    """Root of every error the auditor raises on purpose."""

    exit_code = 2


class InputError(AuditorError):
    """Bad input from the user: a file, an option, an event."""


class MetricFileError(InputError):
    """A metric file that cannot be read, parsed or validated.

    The message names the file and, where known, the key.
    """

    def __init__(self, message: str, *, path: str | None = None, key: str | None = None):
        self.path = path
        self.key = key
        self.detail = message
        where = ""
        if path:
            where = f"{path}: "
        if key:
            where += f"[{key}] "
        super().__init__(f"{where}{message}")


class ExpressionError(MetricFileError):
    """An expression that the safe arithmetic language does not accept.

    ``text`` is the offending expression and ``column`` (0-based) points at the
    offending part; :meth:`caret_line` draws it. ``located`` is the message
    without file and key (reason, column, text and hint), for callers that
    label it themselves, such as ``--at``.
    """

    def __init__(self, message: str, *, text: str = "", column: int | None = None,
                 path: str | None = None, key: str | None = None, hint: str | None = None):
        self.text = text
        self.column = column
        self.reason = message
        self.hint = hint
        shown = message
        if text:
            where = " in" if column is None else f" at column {column + 1} of"
            shown = f"{message}{where} '{_one_line(text)}'"
        if hint:
            shown += f" ({hint})"
        self.located = shown
        super().__init__(shown, path=path, key=key)

    def caret_line(self) -> str:
        """The expression (or, if long, the part around the column) with a
        caret under the offending column."""
        if not self.text or self.column is None:
            return ""
        flat = _one_line(self.text, limit=None)
        width = _CARET_WIDTH
        start = 0
        if len(flat) > width:
            start = max(0, min(self.column - width // 2, len(flat) - width))
        head = "..." if start > 0 else ""
        tail = "..." if start + width < len(flat) else ""
        return (f"{head}{flat[start:start + width]}{tail}\n"
                f"{' ' * (len(head) + self.column - start)}^")


class UsageError(InputError):
    """Bad command-line usage."""


class PointError(InputError):
    """An event that cannot be audited (singular, degenerate, not Lorentzian)."""


class NoAuditablePointError(AuditorError):
    """Every point of the requested region was excluded."""


_CARET_WIDTH = 100


class ReportError(AuditorError):
    """The report could not be drawn or rendered (PDF stack, templates)."""


def _one_line(text: str, limit: int | None = 120) -> str:
    # Each line break or tab becomes one space, so columns still match.
    flat = "".join(" " if ch.isspace() else ch for ch in str(text))
    return flat if limit is None or len(flat) <= limit else flat[: limit - 3] + "..."
