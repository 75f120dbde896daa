"""The ``trapbench`` command. Each subcommand lives in its own module of ``trapbench.bench.commands``.

A command module defines ``NAME``, ``HELP`` and ``register(parser)`` (add its arguments) and
``run(args) -> int`` (the exit code). Errors of user input (SpecError, unknown backend,
unsupported problem) print one line and exit with status 2; failed computations exit with 1.
SIGTERM is handled as Ctrl-C (exit status 130, a sweep keeps its finished tasks): a job started in
the background by a non-interactive shell ignores SIGINT, so ``kill PID`` is how it is stopped.
"""

from __future__ import annotations

import argparse
import importlib
import os
import pkgutil
import signal
import sys
import threading

from ..backends.base import SolverError, Unsupported
from ..backends.registry import UnknownBackend
from ..problems.errors import SpecError
from . import commands

EXIT_INPUT_ERROR = 2
EXIT_FAILED = 1


def _command_modules() -> list:
    modules = [importlib.import_module(f"{commands.__name__}.{info.name}") for info in pkgutil.iter_modules(commands.__path__)]
    return sorted((m for m in modules if hasattr(m, "NAME")), key=lambda m: getattr(m, "ORDER", 50))


def build_parser() -> tuple[argparse.ArgumentParser, dict]:
    from .. import __version__

    parser = argparse.ArgumentParser(
        prog="trapbench",
        description="Few fermions in a 1D trap: one problem, every method, agreement and cost.",
    )
    parser.add_argument("--version", action="version", version=f"trapbench {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    runners = {}
    for module in _command_modules():
        command = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.register(command)
        runners[module.NAME] = module.run
    return parser, runners


NUMBER_LIST_OPTIONS = ("--g", "--a-bohr")


def _join_negative_lists(argv: list[str]) -> list[str]:
    """Let '--g -1,2' mean '--g=-1,2' (argparse takes '-1,2' for an option otherwise)."""
    joined: list[str] = []
    index = 0
    while index < len(argv):
        item = argv[index]
        following = argv[index + 1] if index + 1 < len(argv) else ""
        if item in NUMBER_LIST_OPTIONS and following.startswith("-") and (following[1:2].isdigit() or following[1:2] == "."):
            joined.append(f"{item}={following}")
            index += 2
            continue
        joined.append(item)
        index += 1
    return joined


def main(argv: list[str] | None = None) -> int:
    parser, runners = build_parser()
    args = parser.parse_args(_join_negative_lists(sys.argv[1:] if argv is None else list(argv)))
    if args.command is None:
        parser.print_help()
        return EXIT_INPUT_ERROR
    in_main_thread = threading.current_thread() is threading.main_thread()  # only there may handlers be set
    previous = signal.signal(signal.SIGTERM, signal.default_int_handler) if in_main_thread else None
    try:
        return runners[args.command](args)
    except (SpecError, UnknownBackend, Unsupported) as exc:
        print(f"trapbench {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_INPUT_ERROR
    except SolverError as exc:
        print(f"trapbench {args.command}: failed: {exc}", file=sys.stderr)
        return EXIT_FAILED
    except KeyboardInterrupt:
        print(f"trapbench {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of our output (e.g. `| head`) closed early: not a fault to report
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())  # no second error at interpreter exit
        return 128 + signal.SIGPIPE
    finally:
        if in_main_thread:
            signal.signal(signal.SIGTERM, previous)


if __name__ == "__main__":
    sys.exit(main())
