"""The one exception a user sees for bad input."""

from __future__ import annotations

from collections.abc import Sequence

__all__ = ["InputError"]

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
        self.message = message
        self.file = None if file is None else str(file)
        self.key = key
        self.rows = None if rows is None else [int(r) for r in rows]
        super().__init__(self.format())

    def format(self) -> str:
        parts = []
        if self.file:
            parts.append(self.file)
        if self.key:
            parts.append(f"'{self.key}'")
        if self.rows:
            shown = ", ".join(str(r + 1) for r in self.rows[:_MAX_ROWS_SHOWN])
            more = len(self.rows) - _MAX_ROWS_SHOWN
            tail = f" (and {more} more)" if more > 0 else ""
            word = "row" if len(self.rows) == 1 else "rows"
            parts.append(f"data {word} {shown}{tail}")
        where = ": ".join(parts)
        return _printable(f"{where}: {self.message}" if where else self.message)
