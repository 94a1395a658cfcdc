"""The ``hopscope`` command line: discovers subcommands in :mod:`hopscope.commands` and maps errors to
exit codes (0 success, 2 bad input or usage, 1 anything unexpected)."""

from __future__ import annotations

import os
import signal
import sys
import threading

from .errors import EXIT_INTERRUPTED


def _interrupted_while_starting(_signum, _frame) -> None:  # pragma: no cover - timing-dependent
    # Ctrl-C before main() is running (imports take about a second): one line and exit 130, no traceback.
    # Nothing has been written yet, so there is nothing to clean up.
    os.write(2, b"hopscope: interrupted\n")
    os._exit(EXIT_INTERRUPTED)


def _on_interrupt(handler) -> None:
    if threading.current_thread() is threading.main_thread():  # signals go to the main thread only
        signal.signal(signal.SIGINT, handler)


# First of all: the heavy imports below and in the commands take about a second. Only when this is the
# program (the ``hopscope`` script or ``python -m hopscope.cli``), not when a test or a script imports it.
_AS_PROGRAM = __name__ == "__main__" or os.path.basename(sys.argv[0] if sys.argv else "").startswith(
    "hopscope"
)
if _AS_PROGRAM:
    _on_interrupt(_interrupted_while_starting)

# The numerical work is many small matrices: BLAS threads only oversubscribe the cores (a joint fit's SVD
# took 50x longer on a loaded 2-core machine). Set before numpy is first imported; the user may override.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import importlib  # noqa: E402
import pkgutil  # noqa: E402
import re  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

from . import __version__  # noqa: E402
from .console import quiet_libraries  # noqa: E402
from .errors import EXIT_BAD_INPUT, EXIT_UNEXPECTED  # noqa: E402


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors in one line with exit code 2."""

    def error(self, message: str):  # type: ignore[override]
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message}\n")


def _command_modules():
    from . import commands

    mods = []
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda i: i.name):
        if info.name.startswith("_"):
            continue
        mods.append(importlib.import_module(f"{commands.__name__}.{info.name}"))
    return mods


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="hopscope",
        description="Measure BB flight from high-frame-rate video against a calibration grid.",
    )
    parser.add_argument("--version", action="version", version=f"hopscope {__version__}")
    parser.add_argument("--debug", action="store_true", help="show full tracebacks and library messages")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for mod in _command_modules():
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=getattr(mod, "DESCRIPTION", mod.HELP))
        p.add_argument("--debug", action="store_true", help="show full tracebacks and library messages")
        mod.register(p)
        p.set_defaults(_run=mod.run)
    return parser


_INTERRUPTS: list[int] = []  # SIGINTs seen while main() runs


def _raise_interrupt(signum, _frame) -> None:
    _INTERRUPTS.append(signum)
    raise KeyboardInterrupt


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    debug = "--debug" in argv
    prog = "hopscope"
    _INTERRUPTS.clear()
    try:
        # from here on Ctrl-C raises KeyboardInterrupt, so half-written files and locks are cleaned up
        _on_interrupt(_raise_interrupt)
        if not debug:
            quiet_libraries()
            warnings.simplefilter("ignore")
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "command", None):
            parser.print_help()
            return EXIT_BAD_INPUT
        prog = f"hopscope {args.command}"
        return int(args._run(args) or 0)
    except KeyboardInterrupt:
        return _interrupted(prog)
    except Exception as exc:
        # Ctrl-C inside a compiled module's initialisation surfaces as another error (ImportError)
        if _INTERRUPTS or _caused_by_interrupt(exc):
            return _interrupted(prog)
        if debug:
            raise
        if isinstance(exc, ValueError | OSError):
            print(f"{prog}: error: {_one_line(exc)}", file=sys.stderr)
            return EXIT_BAD_INPUT
        # the contract: one line, exit 1
        print(
            f"{prog}: unexpected error: {type(exc).__name__}: {_one_line(exc)} (rerun with --debug for the traceback)",
            file=sys.stderr,
        )
        return EXIT_UNEXPECTED


def _caused_by_interrupt(exc: BaseException) -> bool:
    seen: BaseException | None = exc
    while seen is not None:
        if isinstance(seen, KeyboardInterrupt):
            return True
        seen = seen.__cause__ or seen.__context__
    return False


def _interrupted(prog: str) -> int:
    """One line for Ctrl-C, exit 130. Files and locks were cleaned up while the interrupt unwound.

    As the program, the process ends here: a Ctrl-C that landed inside a library's embedded Python code
    (during its import) leaves the interpreter set to re-raise SIGINT at exit, which would end it with
    -2 instead of 130.
    """
    print(f"{prog}: interrupted", file=sys.stderr)
    if _AS_PROGRAM:  # pragma: no cover - exercised in a subprocess by the tests
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(EXIT_INTERRUPTED)
    return EXIT_INTERRUPTED


#: The temporary name :func:`hopscope.shared.fileio.atomic_path` gives an output: ``.STEM.XXXX.partialSUFFIX``.
_PARTIAL = re.compile(r"^\.(?P<stem>.*)\.[^.]+\.partial(?P<suffix>.*)$")


def _user_path(name: str | os.PathLike[str] | bytes | int | None) -> str | None:
    """A path as the user gave it: the output's own name in place of its temporary file's."""
    if name is None or isinstance(name, bytes | int):
        return None
    p = Path(name)
    m = _PARTIAL.match(p.name)
    return str(p.with_name(m["stem"] + m["suffix"])) if m else str(p)


def _one_line(exc: BaseException) -> str:
    if isinstance(exc, OSError) and exc.filename is not None:
        path = _user_path(exc.filename)
        temporary = path != str(exc.filename)
        if temporary and (isinstance(exc, IsADirectoryError) or Path(str(path)).is_dir()):
            return f"{path}: is a folder; give the name of the file to write"
        text = exc.strerror or str(exc)
        return " ".join(f"{path}: {text}".split())
    text = str(exc) or type(exc).__name__
    return " ".join(_PARTIAL_IN_TEXT.sub(lambda m: m["stem"] + m["suffix"], text).split())


#: A temporary output name inside a message (from a library that wrote it into its text).
_PARTIAL_IN_TEXT = re.compile(r"\.(?P<stem>[^\s/]*)\.[^\s./]+\.partial(?P<suffix>[^\s:'\"]*)")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
