"""The ``sahaboltz`` command: a thin face over the Python API.

Each subcommand group lives in its own module under ``sahaboltz.faces`` and exposes
``register(subparsers)``; add a new group by listing its module in ``COMMAND_MODULES`` and its
commands in ``COMMANDS``.  Every command can print a readable table or machine-readable CSV /
JSON (``--format``).

``sahaboltz --help`` imports no command module (``COMMANDS`` holds the one-line help of each
command, checked against the modules by tests/test_cli_interface.py), so it answers at once;
a command line imports only the module of the command it names.
"""

from __future__ import annotations

import argparse
import importlib
import re
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

#: command -> (its module, its one-line help) for the top-level help
COMMANDS = {
    "demo": ("sahaboltz.faces.cmd_demo",
             "the demo: a K-dwarf photosphere table and an argon arc, with summary and plots"),
    "info": ("sahaboltz.faces.cmd_species",
             "summarise an element or a species from the database"),
    "levels": ("sahaboltz.faces.cmd_species", "list the energy levels of a species"),
    "partition": ("sahaboltz.faces.cmd_partition",
                  "partition functions U(T) of one or more species"),
    "populations": ("sahaboltz.faces.cmd_partition", "Boltzmann level populations of a species"),
    "state": ("sahaboltz.faces.cmd_state",
              "stage fractions of a gas at one state, or along a structure file (--from)"),
    "half-ionization": ("sahaboltz.faces.cmd_state",
                        "temperatures where each ionization of an element is half complete"),
    "table": ("sahaboltz.faces.cmd_table", "population tables: build, inspect, query, cache"),
    "plot": ("sahaboltz.faces.cmd_plot",
             "draw stage fractions, dominant-stage maps, partition functions, electron "
             "pressures, level populations"),
    "diagnose": ("sahaboltz.faces.cmd_diagnose",
                 "plasma temperature and n_e from measured line intensities"),
}

#: exit status after Ctrl-C (128 + SIGINT), as shells report it
EXIT_INTERRUPTED = 130
#: exit status of every error the command reports (argparse uses the same for bad options)
EXIT_ERROR = 2


def _modules_for(argv: list[str]) -> list[str] | None:
    """The command module to load for the command named first (a command line answers faster
    when it imports only what it needs); None when no known command is named (help)."""
    if argv and not argv[0].startswith("-"):
        entry = COMMANDS.get(argv[0])
        if entry is not None and entry[0] in COMMAND_MODULES:
            return [entry[0]]
    return None


def build_parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    """The parser of every command (``argv`` None), or, given the command line, of the one it
    names; for a command line that names none (``--help``, a typo) the commands are listed
    from ``COMMANDS`` without importing their modules."""
    parser = argparse.ArgumentParser(
        prog="sahaboltz",
        description="LTE ionization and excitation equilibrium (Saha-Boltzmann) of gas mixtures. "
                    "Numeric options take a unit ('1 atm', '1e4 Pa', '6000 K', '5726.85 degC'); "
                    "without one they are in K and cgs units.")
    parser.add_argument("--version", action="version", version=f"sahaboltz {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    modules = COMMAND_MODULES if argv is None else _modules_for(argv)
    if modules is None:
        for name, (module, text) in COMMANDS.items():
            if module in COMMAND_MODULES:
                sub.add_parser(name, help=text, add_help=False)
        return parser
    for name in modules:
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


#: Python argument spellings in the package's messages -> the command line's options (the
#: messages name Python arguments; a command reports them as the options that set them)
_PYTHON_TO_CLI = [
    (re.compile(r"\bPass outside='clip' to clamp onto the edge or outside='nan' for NaN "
                r"there"), "Give --outside clip to clamp onto the edge or --outside nan for "
                           "NaN there"),
    (re.compile(r"\b(outside|truncation|molecules)='([^']*)'"), r"--\1 \2"),
    (re.compile(r"\blowering=True\b"), "--lowering"),
    (re.compile(r"\(species=\.\.\.\)"), "(--species)"),
    (re.compile(r"\belectron_density=\b"), "--electron-density "),
]


def cli_wording(message: str) -> str:
    """A message of the Python API in the command line's words (its options)."""
    for pattern, repl in _PYTHON_TO_CLI:
        message = pattern.sub(repl, message)
    # closure keywords (gas_pressure = ..., "gas_pressure: ...") as their options; the
    # registry is read only here, on an error, to keep the start-up light
    from sahaboltz.equilibrium.closures import CLOSURES
    for c in CLOSURES.values():
        message = re.sub(rf"\b{c.name}(?= = |: )", c.flag, message)
    # the Python remedy for failed states has no command-line form
    return message.replace("\n(errors='mask' returns the other states, with a status per state)",
                           "")


def _os_message(exc: OSError) -> str:
    """'cannot write /x/y: Not a directory' from an OSError, naming the path."""
    where = exc.filename if exc.filename is not None else ""
    what = exc.strerror or type(exc).__name__
    hint = {"EACCES": "check its permissions or choose another place (-o, $SAHABOLTZ_CACHE_DIR)",
            "ENOTDIR": "a part of the path is a file, not a directory",
            "EEXIST": "a part of the path is a file, not a directory",
            "ENOSPC": "the disk is full",
            "EROFS": "the file system is read-only"}
    import errno
    name = errno.errorcode.get(exc.errno or 0, "")
    text = f"{where}: {what}" if where else what
    return text + (f" ({hint[name]})" if name in hint else "")


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        parser = build_parser(argv)
        args = parser.parse_args(argv)
        with warnings.catch_warnings():
            warnings.showwarning = _notes(warnings.showwarning)
            return int(args.func(args) or 0)
    except SahaboltzError as exc:
        print(f"sahaboltz: error: {cli_wording(str(exc))}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print("sahaboltz: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # e.g. piped into head
        return 0
    except OSError as exc:  # a file or directory the command cannot read or write
        print(f"sahaboltz: error: {_os_message(exc)}", file=sys.stderr)
        return EXIT_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
