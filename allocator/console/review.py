"""The console's fleet review output: one row per study."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape

from .. import vocab
from .check import warnings
from .tables import print_table


def review_summary(console: Console, fr) -> None:
    """One row per study of a :class:`~allocator.pipeline.review.FleetReview`: status,
    verdict, blocks outside their band, the lowest share; then why any was not checked."""
    rows = []
    for r in fr.results:
        out_of_band = [row["block"] for row in r.rows if row["block_status"] != vocab.IN_BAND]
        lowest = min(r.rows, key=lambda row: row["min_share_pct"], default=None)
        rows.append((escape(r.name), escape(r.status),
                     escape(vocab.compliance_word(r.compliant)) if r.rows else "",
                     escape(", ".join(out_of_band) or ("none" if r.rows else "")),
                     "" if lowest is None else f"{lowest['min_share_pct']:.1f}",
                     f"{r.seconds:.1f}" if r.seconds == r.seconds else ""))
    print_table(console, f"Fleet review: {len(fr.results)} studies on {escape(fr.cluster)} "
                f"({fr.seconds:.1f} s)", ["study", "status", "verdict", "blocks out of band",
                                          "lowest share %", "check s"], rows, right={4, 5})
    for r in fr.results:
        if r.status != vocab.STUDY_CHECKED:
            console.print(f"[red]{escape(r.name)}[/red]: {escape(r.message)}")
    warnings(console, list(fr.notes))


__all__ = ["review_summary"]
