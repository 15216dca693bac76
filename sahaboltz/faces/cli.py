"""The ``sahaboltz`` command: a thin face over the Python API.

Each subcommand group lives in its own module under ``sahaboltz.faces`` and exposes
``register(subparsers)``; add a new group by listing its module in ``COMMAND_MODULES``.
Every command can print a readable table or machine-readable CSV / JSON (``--format``).
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings

from sahaboltz._version import __version__
from sahaboltz.errors import SahaboltzError, SahaboltzWarning

#: modules that add subcommands, in the order they appear in ``--help``
COMMAND_MODULES = [
    "sahaboltz.faces.cmd_demo",
    "sahaboltz.faces.cmd_species",
    "sahaboltz.faces.cmd_partition",
    "sahaboltz.faces.cmd_state",
    "sahaboltz.faces.cmd_table",
    "sahaboltz.faces.cmd_plot",
    "sahaboltz.faces.cmd_diagnose",
]


def _modules_for(argv: list[str]) -> list[str]:
    """The command modules to load: only the one named first (a command line answers faster
    when it imports only what it needs), or all of them for help and unknown commands."""
    if argv and not argv[0].startswith("-"):
        mine = [m for m in COMMAND_MODULES if m.rsplit("_", 1)[-1] == argv[0]]
        if mine:
            return mine
    return COMMAND_MODULES


def build_parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    """The parser of every command, or (given the command line) of the one it names."""
    parser = argparse.ArgumentParser(
        prog="sahaboltz",
        description="LTE ionization and excitation equilibrium (Saha-Boltzmann) of gas mixtures.")
    parser.add_argument("--version", action="version", version=f"sahaboltz {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name in COMMAND_MODULES if argv is None else _modules_for(argv):
        importlib.import_module(name).register(sub)
    return parser


def _notes(showwarning):
    """A ``warnings.showwarning`` that prints the package's own warnings (validity, a
    misleading truncation) as one line each on stderr and leaves the others as they are."""
    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, SahaboltzWarning):
            text = " ".join(str(message).split())
            print(f"sahaboltz: note: {text}", file=sys.stderr)
        else:
            showwarning(message, category, filename, lineno, file, line)
    return show


def main(argv: list[str] | None = None) -> int:
    parser = build_parser(sys.argv[1:] if argv is None else argv)
    args = parser.parse_args(argv)
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _notes(warnings.showwarning)
            return int(args.func(args) or 0)
    except SahaboltzError as exc:
        print(f"sahaboltz: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # e.g. piped into head
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
