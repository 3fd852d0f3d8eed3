"""Command line: parse options → request → pipeline job → console.  One module per command
(``validate``, ``check``, ``plan``, ``frequency``, ``review``, ``demo``), each with its
``register`` (its options) and its ``run``; the options several share are written once in
:mod:`allocator.cli.options`.  No arithmetic and no file writing lives here: the jobs are in
:mod:`allocator.pipeline`, the printing in :mod:`allocator.console`.

Exit codes: 0 success, 2 bad input (every problem listed, nothing written), 1 internal
error (one line; the traceback only with ``--debug``), 130 interrupted.  ``review`` returns 1
also when any study of the folder could not be checked (the others are written).
"""

from __future__ import annotations

import argparse
import sys
import time

from ..version import __version__
from . import check, demo, frequency, options, plan, review, validate

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130
COMMANDS = (validate, check, plan, frequency, review, demo)


def build_parser() -> argparse.ArgumentParser:
    common = options.common_parser()
    p = argparse.ArgumentParser(
        prog="ufls-allocator",
        description="Allocate distribution feeders to under-frequency load shedding blocks "
                    "and prove, interval by interval, how much netted demand each block holds.",
        parents=[common])
    p.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    for cmd in COMMANDS:
        cmd.register(sub, common)
    return p


def _run(args, console, err) -> tuple[int, bool]:
    """The command, with every failure turned into its exit code and one message; the flag
    is True when the command ran to its end."""
    import traceback

    from rich.markup import escape

    from ..errors import InputError
    from ..safeio import OutputClashError

    try:
        return args.func(args, console), True
    except InputError as exc:
        err.print(f"[red]error:[/red] {escape(exc.render())}", markup=True, highlight=False)
        err.print("Nothing was written.")
        return EXIT_INPUT, False
    except OutputClashError as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}. Nothing was written.")
        return EXIT_INPUT, False
    except KeyboardInterrupt:
        err.print("interrupted; previous outputs left as they were")
        return EXIT_INTERRUPTED, False
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into exit 1
        if args.debug:
            traceback.print_exc()
        msg = str(exc).splitlines()[0] if str(exc) else ""
        err.print(f"[red]internal error:[/red] {type(exc).__name__}: {escape(msg)} "
                  "(run with --debug for the traceback)")
        return EXIT_INTERNAL, False


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    args.argv = list(sys.argv[1:] if argv is None else argv)  # for the run record
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_OK
    from rich.console import Console

    from ..console import make_console

    console = make_console(quiet=args.quiet)
    err = Console(stderr=True, highlight=False, soft_wrap=True)
    t0 = time.perf_counter()
    rc, ended = _run(args, console, err)
    if ended and not args.quiet and args.command != "validate":
        console.print(f"[dim]done in {time.perf_counter() - t0:.1f} s[/dim]")
    return rc


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
