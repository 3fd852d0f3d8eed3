"""Progress on the terminal: a spinner per step (none in piped output), the demo's numbered
steps with their times, and the planner's rounds."""

from __future__ import annotations

import contextlib
import time


def spinner(console, quiet: bool):
    """A :data:`allocator.pipeline.inputs.Progress` showing a spinner while each step runs,
    on a terminal only: piped output gets no animation and no control characters."""
    def step(words: str):
        if quiet or not console.is_terminal:
            return contextlib.nullcontext()
        return console.status(words)
    return step


def numbered(console, names, quiet: bool):
    """A Progress for a known list of steps: ``✓ [k/n] name (t s)`` as each one ends; other
    step words just show a spinner."""
    spin = spinner(console, quiet)

    @contextlib.contextmanager
    def step(words: str):
        if words not in names:
            with spin(words):
                yield
            return
        k = names.index(words) + 1
        t0 = time.perf_counter()
        with spin(f"[{k}/{len(names)}] {words}"):
            yield
        if not quiet:
            console.print(f"[green]✓[/green] [{k}/{len(names)}] {words} "
                          f"({time.perf_counter() - t0:.1f} s)")
    return step


@contextlib.contextmanager
def planner_rounds(console, quiet: bool):
    """Yields an ``on_round(level, round, intervals, worst, status)`` callback that shows
    the planner's progress on one transient line (nothing in piped output)."""
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    live = not quiet and console.is_terminal
    with Progress(SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn(),
                  console=console, disable=not live, transient=True) as prog:
        task = prog.add_task("planning: heuristic start", total=None)

        def on_round(level, round, intervals, worst, status):
            w = "" if worst != worst else f", worst {100 * worst:.2f} % of target"
            prog.update(task, description=f"planning: {level} round {round}, "
                        f"{intervals} intervals{w}")
        yield on_round
