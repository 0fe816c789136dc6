"""The ``surfcross`` program: parse, call the library, print, map errors to exit codes.

Exit codes: 0 converged/finished, 1 ran but did not converge (or an engine failure),
2 bad input or usage. No science lives here.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import signal
import sys

from ..errors import CheckpointError, InputError, SurfcrossError

__all__ = ["main", "build_parser", "SUBCOMMANDS"]

#: subcommand modules under surfcross.cli; each defines ``add_parser(subparsers)`` which
#: registers the subcommand with ``set_defaults(handler=run)``, and ``run(args) -> int``.
SUBCOMMANDS = ("states", "relax", "cross", "resume", "run", "demo", "emission", "path", "scan",
               "batch", "seams")

EXIT_OK, EXIT_NOT_CONVERGED, EXIT_BAD_INPUT = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit code 2
        self.exit(EXIT_BAD_INPUT, f"surfcross: error: {message} (see 'surfcross -h')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="surfcross",
        description="Excited-state minima and minimum-energy crossing points on PySCF surfaces.",
    )
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more output")
    parser.add_argument("-q", "--quiet", action="store_true", help="only errors and the summary")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in SUBCOMMANDS:
        module = importlib.import_module(f"{__package__}.{name.replace('-', '_')}")
        module.add_parser(sub)
    return parser


def _configure_logging(verbose: int, quiet: bool) -> None:
    level = logging.WARNING if quiet else (logging.DEBUG if verbose > 1 else logging.INFO)
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(message)s"))
    root = logging.getLogger("surfcross")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False


def _one_line(exc: Exception) -> str:
    return " ".join(str(exc).split())


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    _configure_logging(args.verbose, args.quiet)
    previous = _install_interrupt_handler()
    try:
        return int(args.handler(args))
    except BrokenPipeError:  # output piped into a reader that closed early (e.g. head)
        # point stdout at the null device so the flush at exit does not fail a second time
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except (InputError, CheckpointError) as exc:  # bad input, or a run that cannot continue
        if getattr(args, "created_run_dir", None) is not None:
            from ..io.run import discard_unused

            discard_unused(args.created_run_dir)
        print(f"surfcross: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except SurfcrossError as exc:
        print(f"surfcross: failed: {_one_line(exc)}", file=sys.stderr)
        return EXIT_NOT_CONVERGED
    except KeyboardInterrupt as exc:
        where = getattr(exc, "run_dir", None) or "DIR"
        print(f"surfcross: interrupted; 'surfcross resume {where}' continues from the checkpoint",
              file=sys.stderr)
        return 130
    finally:
        if previous is not None:
            signal.signal(signal.SIGINT, previous)


def _install_interrupt_handler():
    """First Ctrl-C: finish the current step (it reaches the checkpoint), then stop with exit
    code 130. Second Ctrl-C: stop at once. Returns the previous handler (None if unchanged)."""
    from ..tasks.run import request_stop

    if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
        return None  # started with interrupts ignored (e.g. a background job): keep it so

    def on_interrupt(signum, frame):
        if on_interrupt.asked:
            raise KeyboardInterrupt
        on_interrupt.asked = True
        request_stop()
        print("surfcross: stopping after the current step (Ctrl-C again to stop at once)",
              file=sys.stderr)

    on_interrupt.asked = False
    try:
        return signal.signal(signal.SIGINT, on_interrupt)
    except ValueError:  # not the main thread (e.g. main() called from a worker)
        return None


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
