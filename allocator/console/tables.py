"""Console rendering (rich).  No number is ever cut: every table goes through
:func:`print_table`, which fixes each column at least as wide as its longest value, lets
headers wrap into the width left, and switches to one block of "header: value" lines per row
when even that does not fit (80 columns and piped output included)."""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.table import Table
from rich.text import Text


class _Piped:
    """Standard output for piped runs (a file, a log): each line without the spaces rich
    pads it with.  Rich writes a whole print at once, so a line is never split between two
    writes.  Looked up at each write, so a redirected ``sys.stdout`` is followed."""

    def write(self, text: str) -> int:
        import sys

        sys.stdout.write("\n".join(line.rstrip(" ") for line in text.split("\n")))
        return len(text)

    def flush(self) -> None:
        import sys

        sys.stdout.flush()

    def isatty(self) -> bool:
        return False

    @property
    def encoding(self) -> str:
        import sys

        return getattr(sys.stdout, "encoding", None) or "utf-8"


def make_console(quiet: bool = False) -> Console:
    """The console every command prints to (no highlighting, no soft wrap); piped, its
    lines carry no trailing spaces."""
    import sys

    piped = not sys.stdout.isatty()
    return Console(quiet=quiet, highlight=False, soft_wrap=False,
                   file=_Piped() if piped else None)


def _cell_len(markup: str) -> int:
    return max((Text.from_markup(line).cell_len for line in markup.split("\n")), default=0)


def _word_len(markup: str) -> int:
    return max((len(w) for w in Text.from_markup(markup).plain.split()), default=0)


def _widths(width: int, heads, rows, right) -> list[int] | None:
    """Column widths for ``width`` console columns, or None when even the narrowest
    layout does not fit.  Numbers (``right``) keep their full width; text may wrap at
    spaces; what is left goes first to whole headers, then to whole text cells."""
    n = len(heads)
    full = [max([_cell_len(r[j]) for r in rows] + [0]) for j in range(n)]
    least = [max([_word_len(h)] + ([full[j]] if j in right else
                                   [_word_len(r[j]) for r in rows]))
             for j, h in enumerate(heads)]
    spare = width - (sum(least) + 3 * n - 3)  # separators and inner padding, no edges
    if spare < 0:
        return None
    w = list(least)
    for want in ([max(len(h), full[j]) for j, h in enumerate(heads)],
                 [max(w[j], full[j]) for j in range(n)]):
        for j in sorted(range(n), key=lambda j: want[j] - w[j]):
            grow = min(spare, max(0, want[j] - w[j]))
            w[j] += grow
            spare -= grow
    return w


def print_table(console: Console, title: str, heads: list[str], rows: list[tuple[str, ...]],
                right: set[int] = frozenset(), caption: str | None = None) -> None:
    """A table that never cuts a value (cells are rich markup).  Columns in ``right`` are
    right-aligned numbers and never wrap; text wraps at spaces.  Below the width the table
    needs, each row becomes a block of lines: the first cell, then "header: value"."""
    w = _widths(console.width, heads, rows, right)
    if w is None:
        console.print(title)
        for r in rows:
            console.print(r[0].replace("\n", " "))
            for h, v in zip(heads[1:], r[1:]):
                console.print(f"  {escape(h)}: {v.replace(chr(10), ' ')}")
        if caption:
            console.print(caption)
        return
    t = Table(title=title, title_justify="left", box=box.SIMPLE_HEAD, padding=(0, 1),
              caption=caption, caption_justify="left", show_edge=False, pad_edge=False)
    for j, h in enumerate(heads):
        # numbers never wrap: their column is as wide as the widest (see _widths)
        t.add_column(escape(h), justify="right" if j in right else "left", width=w[j])
    for r in rows:
        t.add_row(*r)
    console.print(t)


def print_pairs(console: Console, title: str | None, pairs: list[tuple[str, str]]) -> None:
    """Labelled values (rich markup), two columns: the labels as wide as the longest, the
    values wrapping at spaces into the width left; "label: value" lines when even that does
    not fit.  Nothing is cut."""
    rows = [(escape(k), v) for k, v in pairs]
    w = _widths(console.width, ["", ""], rows, set())
    if title:
        console.print(title)
    if w is None:
        for k, v in rows:
            console.print(f"{k}: {v}")
        return
    t = Table(show_header=False, box=None, padding=(0, 1), pad_edge=False, show_edge=False)
    t.add_column(style="bold", width=w[0], overflow="fold")
    t.add_column(width=w[1], overflow="fold")
    for k, v in rows:
        t.add_row(k, v)
    console.print(t)




__all__ = ["make_console", "print_table", "print_pairs"]
