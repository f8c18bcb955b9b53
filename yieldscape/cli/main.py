"""Entry point: parse, call the library once, map errors to exit codes.

Exit codes: 0 success, 2 bad input or an output location that cannot be used (a message naming
file, layer, field, row, key or path), 1 an unexpected error (a bug: the traceback is printed),
130 interrupted by SIGINT (Ctrl-C) and 143 by SIGTERM (nothing written).
"""

from __future__ import annotations

import argparse
import io
import logging
import signal
import sys
import threading
import traceback
from collections.abc import Iterator, Sequence
from contextlib import contextmanager

from yieldscape.cli import check as check_cmd
from yieldscape.cli import compare as compare_cmd
from yieldscape.cli import curves as curves_cmd
from yieldscape.cli import fit as fit_cmd
from yieldscape.cli import run as run_cmd
from yieldscape.errors import InputError
from yieldscape.versions import library_versions

EXIT_OK, EXIT_BUG, EXIT_INPUT = 0, 1, 2
EXIT_SIGINT, EXIT_SIGTERM = 128 + signal.SIGINT, 128 + signal.SIGTERM


def _version_text() -> str:
    v = library_versions()
    rest = ", ".join(f"{k} {val}" for k, val in v.items() if k != "yieldscape")
    return f"yieldscape {v['yieldscape']} ({rest})"


class _VersionAction(argparse.Action):
    def __init__(self, option_strings: Sequence[str], dest: str, **kwargs: object) -> None:
        super().__init__(option_strings, dest, nargs=0, help="show versions and exit")

    def __call__(self, parser, namespace, values, option_string=None):  # noqa: ANN001
        print(_version_text())
        parser.exit()


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="yieldscape",
        description="Timber supply projection: grow a stand layer forward, schedule harvests "
        "under a flow policy and spatial, cover and land-base rules, write GeoPackage layers and "
        "wood-flow tables.",
    )
    parser.add_argument("--version", action=_VersionAction)
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "-v",
        "--verbose",
        action="count",
        default=0,
        help="more progress detail on stderr (-vv for debug)",
    )
    common.add_argument(
        "-q", "--quiet", action="store_true", help="print errors only (no progress, no summary)"
    )
    scenario_opts = argparse.ArgumentParser(add_help=False, parents=[common])
    scenario_opts.add_argument(
        "--set",
        dest="overrides",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="override a scenario key, e.g. --set flow.band=0.1 (repeatable)",
    )
    scenario_opts.add_argument(
        "--strict", action="store_true", help="reject invalid geometries instead of repairing them"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for module in (run_cmd, check_cmd, curves_cmd):  # commands that read a scenario
        module.add_parser(sub, scenario_opts)
    fit_cmd.add_parser(sub, common)
    compare_cmd.add_parser(sub, common)
    return parser


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised where the program is, so that it takes the way out of Ctrl-C: staged
    output removed, a message, exit code 128 + 15."""


def _terminate(signum: int, frame: object) -> None:
    raise Terminated


@contextmanager
def _sigterm_as_interrupt() -> Iterator[None]:
    if threading.current_thread() is not threading.main_thread():
        yield  # only the main thread may set handlers (main() called from a worker thread)
        return
    previous = signal.signal(signal.SIGTERM, _terminate)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _setup_logging(verbose: int, quiet: bool) -> None:
    level = logging.ERROR if quiet else (logging.DEBUG if verbose > 1 else logging.INFO)
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("yieldscape: %(message)s"))
    handler.setLevel(level)  # the console's level; run.log keeps INFO and above regardless
    logger = logging.getLogger("yieldscape")
    logger.handlers[:] = [handler]
    logger.setLevel(min(level, logging.INFO))
    logger.propagate = False


def main(argv: Sequence[str] | None = None) -> int:
    for stream in (sys.stdout, sys.stderr):  # a path in another encoding is shown, escaped
        if isinstance(stream, io.TextIOWrapper):
            stream.reconfigure(errors="backslashreplace")
    parser = build_parser()
    args = parser.parse_args(argv)
    _setup_logging(args.verbose, args.quiet)
    try:
        with _sigterm_as_interrupt():
            return int(args.handler(args))
    except InputError as exc:
        print(f"yieldscape: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt as exc:
        name, code = (
            ("SIGTERM", EXIT_SIGTERM) if isinstance(exc, Terminated) else ("SIGINT", EXIT_SIGINT)
        )
        notes = getattr(exc, "__notes__", None)  # the output was in place before the signal
        print(
            f"yieldscape: interrupted ({name}); {notes[0] if notes else 'no output was written'}",
            file=sys.stderr,
        )
        return code
    except Exception:  # a bug: show everything so it can be reported
        traceback.print_exc()
        print(
            "yieldscape: unexpected error (a bug); please report it with the traceback above",
            file=sys.stderr,
        )
        return EXIT_BUG


if __name__ == "__main__":
    sys.exit(main())
