"""The ``lifecycle`` command: a thin layer over the package's functions.

Exit codes: 0 done; 2 bad input, usage or a refused model file (one message, nothing written);
1 an internal fault.
"""

from __future__ import annotations

import argparse
import logging
import sys
import traceback
from collections.abc import Sequence

from .._warnings import logged_once
from ..errors import InputError, LifecycleError, ModelFileError, UsageError
from . import _commands, _explain

log = logging.getLogger("lifecycle")


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lifecycle",
        description="Customer-lifecycle survival modelling: panels, hazards, value, plans.",
    )
    parser.add_argument(
        "-v", "--verbose", action="count", default=0, help="log each step (-vv: and details)"
    )
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for command in (*_commands.COMMANDS, _explain.EXPLAIN):
        p = sub.add_parser(command.name, help=command.help, description=command.help)
        command.arguments(p)
        p.set_defaults(run=command.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``lifecycle`` console script; returns the exit code."""
    args = _parser().parse_args(argv)
    level = {0: logging.WARNING, 1: logging.INFO}.get(args.verbose, logging.DEBUG)
    logging.basicConfig(level=level, format="%(levelname)s %(name)s: %(message)s", force=True)
    try:
        with logged_once():  # a library warning is logged once per command
            args.run(args)
    except (InputError, UsageError, ModelFileError) as exc:
        print(f"lifecycle {args.command}: {exc}", file=sys.stderr)
        return 2
    except LifecycleError as exc:
        print(f"lifecycle {args.command}: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print(f"lifecycle {args.command}: interrupted; nothing partial was kept", file=sys.stderr)
        return 1
    except Exception:
        traceback.print_exc()
        print(
            f"lifecycle {args.command}: internal fault (the trace above); please report it",
            file=sys.stderr,
        )
        return 1
    return 0
