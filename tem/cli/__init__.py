"""Command line: one thin subcommand per stage over the library.

Each module in this package that defines ``add_parser(subparsers)`` and
``run(args) -> int`` is a subcommand. Bad input (:class:`TemInputError`)
prints one line and exits with status 2.
"""
from __future__ import annotations

import argparse
import errno
import importlib
import pkgutil
import signal
import sys
import threading

from .. import SAFETY_NOTE, __version__
from ..errors import TemInputError, TemOutputError

__all__ = ["main", "build_parser"]

_ORDER = ["forward", "synth", "stack", "gate", "import_", "decays", "rhoa", "invert", "section", "export", "report",
          "evening",
          "run", "demo"]


def _command_modules():
    names = [m.name for m in pkgutil.iter_modules(__path__) if not m.name.startswith("_")]
    names.sort(key=lambda n: (_ORDER.index(n) if n in _ORDER else len(_ORDER), n))
    for name in names:
        mod = importlib.import_module(f"{__name__}.{name}")
        if hasattr(mod, "add_parser") and hasattr(mod, "run"):
            yield name, mod


class _Parser(argparse.ArgumentParser):
    """argparse with one-line option errors: ``tem <command>: <option>: <problem> (tem
    <command> --help lists the options)``, exit status 2, not the usage block first."""

    def error(self, message):
        text = " ".join(str(message).split())
        if text.startswith("argument "):
            text = text[len("argument "):]
        option = text.split(": ", 1)[0]
        if text.endswith("expected one argument") and option.startswith("--"):
            # argparse takes '-10,10' for an option, not for the value
            name = option.split("/")[-1]
            text += f"; a value that starts with '-' is written {name}=-VALUE"
        what = "commands" if self.prog == "tem" else "options"
        self.exit(2, f"{self.prog}: {text} ({self.prog} --help lists the {what})\n")

    def parse_args(self, args=None, namespace=None):
        # an unknown option is the command's error, not the top-level parser's
        args, extra = self.parse_known_args(args, namespace)
        if extra:
            commands = getattr(self, "commands", None)
            parser = commands.choices.get(getattr(args, "command", None)) if commands else None
            (parser or self).error(f"unrecognized arguments: {' '.join(extra)}")
        return args


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="tem",
        description="Land time-domain EM: raw recordings to stacked decays, apparent "
        "resistivity, 1D models, sections and seismic-ready exports.",
        epilog="CAUTION: " + SAFETY_NOTE,
    )
    parser.add_argument("--version", action="version", version=f"tem {__version__}")
    sub = parser.commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, mod in _command_modules():
        p = mod.add_parser(sub)
        p.set_defaults(_run=mod.run)
    return parser


def _terminated(signum, frame):
    raise SystemExit(128 + signum)


def _errno_name(exc: OSError) -> str:
    return errno.errorcode.get(exc.errno or 0, type(exc).__name__)


def main(argv=None) -> int:
    # a file-size limit then fails a write (EFBIG, one error line) instead of killing the process
    if hasattr(signal, "SIGXFSZ"):
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    # SIGTERM ends the command like Ctrl-C: locks released, temporaries removed, workers stopped
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _terminated)
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    try:
        return int(args._run(args) or 0)
    except TemInputError as exc:
        print(f"tem {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except TemOutputError as exc:
        print(f"tem {args.command}: error: {exc.strerror}", file=sys.stderr)
        return 1
    except OSError as exc:
        if exc.errno not in (errno.ENOSPC, errno.EFBIG, errno.EIO, errno.EDQUOT, errno.EROFS,
                             errno.EACCES):
            raise
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"tem {args.command}: error: {where}cannot write: {exc.strerror or _errno_name(exc)}",
              file=sys.stderr)
        return 1
    except KeyboardInterrupt:  # pragma: no cover
        print("tem: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
