"""The `cloakrcs` command line: a thin layer over the engine.

Each subcommand lives in ``analysis/commands/<name>.py`` with ``register(subparsers)``
and ``run(args) -> exit status``. Bad input prints one line on stderr and exits 2;
never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import re
import signal
import sys

from . import __version__
from .errors import InputError

COMMANDS = ("inspect", "process", "reference", "simulate", "history", "compare", "revision",
            "report", "export", "serve", "process-many", "demo", "image")
_NEGATIVE_VALUE = re.compile(r"^-(\d|\.\d)")


def rejoin_negative_values(argv: list[str]) -> list[str]:
    """Turn ``--opt -30:30:61`` into ``--opt=-30:30:61`` so values may start with a minus sign."""
    out: list[str] = []
    i = 0
    while i < len(argv):
        tok = argv[i]
        if tok.startswith("--") and "=" not in tok and i + 1 < len(argv) and _NEGATIVE_VALUE.match(argv[i + 1]):
            out.append(f"{tok}={argv[i + 1]}")
            i += 2
            continue
        out.append(tok)
        i += 1
    return out


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, status 2, like every input problem
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="cloakrcs", description="RCS test analysis for cloak prototypes.")
    parser.add_argument("--version", action="version", version=f"cloakrcs {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        module_name = name.replace("-", "_")
        try:
            module = importlib.import_module(f".commands.{module_name}", __package__)
        except ModuleNotFoundError as exc:
            if exc.name and exc.name.endswith(f"commands.{module_name}"):
                continue  # command not built yet
            raise
        module.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run one command; returns its exit status. Ctrl-C at any moment before the command's work is
    complete exits 130 with one line; once it is complete (called as the program), Ctrl-C is ignored."""
    as_program = argv is None
    try:
        code = _run(argv)
    except KeyboardInterrupt:
        print("cloakrcs: interrupted", file=sys.stderr)
        code = 130
    if as_program:  # the work is done (or refused): a late Ctrl-C must not turn that into a signal death
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    return code


def _run(argv: list[str] | None) -> int:
    argv = rejoin_negative_values(list(sys.argv[1:] if argv is None else argv))
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        print(f"cloakrcs: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        return 0
    except Exception as exc:
        from sqlalchemy.exc import DatabaseError

        if not isinstance(exc, DatabaseError):
            raise
        from .store import damaged_store_error

        print(f"cloakrcs: {damaged_store_error(getattr(args, 'store', None) or 'the default store', exc)}",
              file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
