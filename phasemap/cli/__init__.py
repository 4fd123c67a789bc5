"""Command-line interface: ``phasemap <command> ...``.

Each command group lives in its own module exposing ``register(subparsers)``; every command
function returns an exit code. Bad input (:class:`phasemap.ConfigError`) -> one-line message
on stderr and exit code 2, nothing written.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from ..model import ConfigError

# command-group modules, in the order they appear in --help
GROUPS = ["point", "run", "replot", "demo", "ed", "scaling", "qmc", "strain"]


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own errors: one line, exit 2
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="phasemap", description="Ground-state phase diagrams of extended Bose-Hubbard models.")
    from .. import __version__

    p.add_argument("--version", action="version", version=f"phasemap {__version__}")
    sub = p.add_subparsers(dest="command", metavar="<command>", parser_class=_Parser)
    for name in GROUPS:
        try:
            mod = importlib.import_module(f".{name}", __name__)
        except ModuleNotFoundError as e:
            if e.name == f"{__name__}.{name}":
                continue  # group not built yet
            raise
        mod.register(sub)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as e:  # argparse's one-line error (already printed): exit code 2, no traceback
        if e.code == 2:
            return 2
        raise  # --help, --version
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        return int(args.func(args) or 0)
    except ConfigError as e:
        print(f"phasemap: error: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("phasemap: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into e.g. `head`
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
