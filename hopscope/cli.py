"""The ``hopscope`` command line: discovers subcommands in :mod:`hopscope.commands` and maps errors to
exit codes (0 success, 2 bad input or usage, 1 anything unexpected)."""

from __future__ import annotations

import os

# The numerical work is many small matrices: BLAS threads only oversubscribe the cores (a joint fit's SVD
# took 50x longer on a loaded 2-core machine). Set before numpy is first imported; the user may override.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import importlib  # noqa: E402
import pkgutil  # noqa: E402
import sys  # noqa: E402
import warnings  # noqa: E402

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


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    debug = "--debug" in argv
    if not debug:
        quiet_libraries()
        warnings.simplefilter("ignore")
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    prog = f"hopscope {args.command}"
    try:
        return int(args._run(args) or 0)
    except KeyboardInterrupt:
        print(f"{prog}: interrupted", file=sys.stderr)
        return 130
    except (ValueError, OSError) as exc:
        if debug:
            raise
        print(f"{prog}: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except Exception as exc:  # the contract: one line, exit 1
        if debug:
            raise
        print(
            f"{prog}: unexpected error: {type(exc).__name__}: {_one_line(exc)} (rerun with --debug for the traceback)",
            file=sys.stderr,
        )
        return EXIT_UNEXPECTED


def _one_line(exc: BaseException) -> str:
    text = str(exc) or type(exc).__name__
    if isinstance(exc, OSError) and exc.filename and str(exc.filename) not in text:
        text = f"{exc.filename}: {exc.strerror or text}"
    elif isinstance(exc, OSError) and exc.filename and exc.strerror:
        text = f"{exc.filename}: {exc.strerror}"
    return " ".join(text.split())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
