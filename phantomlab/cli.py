"""The ``phantomlab`` command line (layer 5): argument parsing and output, no physics.

Each sub-command lives in a module of :mod:`phantomlab.commands` that defines
``register(subparsers)``; the module adds its parser and sets ``handler`` to a function
``handler(args) -> CommandResult``.  This module owns the automation contract of docs/contract.md:

* ``--json`` prints exactly one JSON object on stdout and nothing else;
* every :class:`~phantomlab.errors.PhantomlabWarning` raised while the command ran is
  collected into the ``warnings`` list of that object (and printed after the readable text);
* an :class:`~phantomlab.errors.InputError` (or any ``ValueError`` raised on bad input) ends
  the command with its one-line reason on stderr and exit status 2; so does an option the
  parser refuses (one line, no usage block);
* Ctrl-C ends it with one line and exit status 130; commands write their files only once
  their work is done (a temporary file renamed into place), so nothing is left half-written.
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import sys
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable

# One BLAS thread unless the user sets another count: phantomlab's matrices are small
# (adding-doubling streams, two- and three-parameter fits batched over wavelengths), and two
# BLAS threads fighting over two cores slow them down (bench/slab_fit.py, a 601-wavelength
# three-parameter slab inversion: 0.8 s with one thread, 1.6-3.4 s with two).  Set before
# numpy is loaded; the Monte Carlo runs use numba's own threads and are not affected.
for _variable in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_variable, "1")

from phantomlab import __version__  # noqa: E402
from phantomlab.errors import InputError, PhantomlabWarning  # noqa: E402
from phantomlab.jsonable import to_jsonable  # noqa: E402

#: Modules that contribute sub-commands, in the order ``--help`` lists them.
COMMAND_MODULES: tuple[str, ...] = (
    "phantomlab.commands.stock",
    "phantomlab.commands.fit",
    "phantomlab.commands.calibrate",
    "phantomlab.commands.calibration",
    "phantomlab.commands.correct",
    "phantomlab.commands.batch",
    "phantomlab.commands.lab",
    "phantomlab.commands.forward",
    "phantomlab.commands.plan",
    "phantomlab.commands.baseline",
    "phantomlab.commands.chromophore",
    "phantomlab.commands.unmix",
    "phantomlab.commands.oxygenation",
)


@dataclass
class CommandResult:
    """What a command hands back: the JSON payload and the readable text for a person."""

    payload: dict[str, Any]
    text: str = ""
    warnings: list[str] = field(default_factory=list)


Handler = Callable[[argparse.Namespace], CommandResult]


def add_json_option(parser: argparse.ArgumentParser) -> None:
    """Add the ``--json`` switch every computing command carries."""
    parser.add_argument(
        "--json", action="store_true", help="print one JSON object on stdout and nothing else"
    )


class _OneLineParserError(Exception):
    pass


class _Parser(argparse.ArgumentParser):
    """An argument parser whose refusals are one line (raised, printed by :func:`main`)."""

    def error(self, message: str):  # noqa: D401 - argparse's hook
        raise _OneLineParserError(f"{self.prog}: {message} (see {self.prog} --help)")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="phantomlab",
        description="Design, mix, log and correct tissue-simulating optical phantoms.",
    )
    parser.add_argument("--version", action="version", version=f"phantomlab {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module_name in COMMAND_MODULES:
        importlib.import_module(module_name).register(subparsers)
    return parser


def _emit_error(message: str) -> int:
    print(f"phantomlab: error: {' '.join(str(message).split())}", file=sys.stderr)
    return 2


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the process exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except _OneLineParserError as exc:
        return _emit_error(str(exc))
    handler: Handler | None = getattr(args, "handler", None)
    if handler is None:
        return _emit_error("give a command, e.g. phantomlab plan RECIPE.toml (phantomlab --help lists them)")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        try:
            result = handler(args)
        except InputError as exc:
            return _emit_error(str(exc))
        except (ValueError, KeyError, FileNotFoundError, IsADirectoryError) as exc:
            return _emit_error(str(exc) or type(exc).__name__)
        except KeyboardInterrupt:
            print("phantomlab: interrupted; nothing was written", file=sys.stderr)
            return 130
    collected = list(result.warnings)
    for item in caught:
        if issubclass(item.category, PhantomlabWarning):
            message = " ".join(str(item.message).split())
            if message not in collected:
                collected.append(message)
    payload = dict(result.payload)
    existing = [w for w in payload.get("warnings", []) if w not in collected]
    payload["warnings"] = existing + collected
    if getattr(args, "json", False):
        sys.stdout.write(json.dumps(to_jsonable(payload), allow_nan=False) + "\n")
    else:
        if result.text:
            sys.stdout.write(result.text.rstrip("\n") + "\n")
        for message in payload["warnings"]:
            sys.stdout.write(f"warning: {message}\n")
    return 0


def entry_point() -> None:  # console script
    try:
        status = main()
        sys.stdout.flush()
    except BrokenPipeError:
        # The reader (e.g. `| head`) closed the pipe: stop quietly, as other tools do.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        status = 0
    sys.exit(status)
