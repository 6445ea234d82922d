"""The one exception a user sees for bad input, and the one warning for implausible input."""

from __future__ import annotations

from collections.abc import Sequence

__all__ = ["InputError", "PlausibilityWarning", "plural"]

_MAX_ROWS_SHOWN = 5


def _printable(text: str) -> str:
    """Escape control characters (newline, tab, NUL, ...) so that a message stays on one line."""
    return "".join(c if c.isprintable() or c == " " else repr(c)[1:-1] for c in text)


class InputError(ValueError):
    """Bad input: names the file, the column or key, and the first offending rows.

    Parameters
    ----------
    message : str
        What is wrong, in plain words.
    file : str, optional
        The file the problem is in.
    key : str, optional
        The column (tables) or key (run file) concerned.
    rows : sequence of int, optional
        Zero-based data-row indices; shown one-based as data rows (header excluded).
    """

    def __init__(self, message: str, *, file: str | None = None, key: str | None = None,
                 rows: Sequence[int] | None = None):
        _locate(self, message, file, key, rows)
        super().__init__(self.format())

    def format(self) -> str:
        return _format(self.message, self.file, self.key, self.rows)


def plural(n: int, word: str, many: str | None = None) -> str:
    """``"1 anchor"``, ``"2 anchors"``; ``many`` for irregular plurals (``plural(n, "galaxy", "galaxies")``)."""
    n = int(n)
    return f"{n} {word if n == 1 else (many or word + 's')}"


def _locate(obj, message, file, key, rows) -> None:
    """Set the parts an :class:`InputError` or :class:`PlausibilityWarning` names (file, key, zero-based rows)."""
    obj.message = message
    obj.file = None if file is None else str(file)
    obj.key = key
    obj.rows = None if rows is None else [int(r) for r in rows]


def _format(message, file, key, rows) -> str:
    """``file: 'key': data rows 1, 2: message`` (the parts that are known)."""
    parts = []
    if file:
        parts.append(file)
    if key:
        parts.append(f"'{key}'")
    if rows:
        shown = ", ".join(str(r + 1) for r in rows[:_MAX_ROWS_SHOWN])
        more = len(rows) - _MAX_ROWS_SHOWN
        tail = f" (and {more} more)" if more > 0 else ""
        word = "row" if len(rows) == 1 else "rows"
        parts.append(f"data {word} {shown}{tail}")
    where = ": ".join(parts)
    return _printable(f"{where}: {message}" if where else message)


class PlausibilityWarning(UserWarning):
    """A valid number that is implausible for its column (most often a unit mistake).

    Same parts as :class:`InputError` (file, column or key, rows, what is likely wrong). ``ladder check``
    and ``ladder fit`` print each as ``ladder: warning: ...``; with ``--strict`` they are errors (exit 2).
    From Python, turn them into exceptions with ``warnings.simplefilter("error", PlausibilityWarning)``.
    """

    def __init__(self, message: str, *, file: str | None = None, key: str | None = None,
                 rows: Sequence[int] | None = None):
        _locate(self, message, file, key, rows)
        super().__init__(_format(self.message, self.file, self.key, self.rows))
