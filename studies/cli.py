"""The ``filamant`` command: a registry of verbs, each in its own module, imported on use.

``main(argv)`` returns the exit status: 0 success, 2 bad input (any
:class:`~sweeps.errors.FilamantError`, or a usage error), 1 an unexpected failure, 130 an
interrupt. Errors are one line on stderr, ``filamant: error: <message>``; ``--debug`` adds the
traceback. Results go to stdout, logs to stderr (``-v`` info, ``-vv`` debug).
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import logging
import sys
import traceback
from collections.abc import Sequence
from types import ModuleType

from studies.tomlfile import suggest
from sweeps.errors import FilamantError

__all__ = ["main", "VERBS", "verb_module_name", "build_parser"]

#: Every verb of the contract with its one-line summary (shown without importing the verb).
VERBS: dict[str, str] = {
    "evaluate": "evaluate one design (TOML) or one Touchstone result: metrics, Touchstone export",
    "run": "run a study: plan, evaluate on a dask cluster, store (resumes what is missing)",
    "status": "progress of a study: planned, done, failed",
    "export": "export a study's results as a table (CSV, Parquet) or as Touchstone files",
    "import": "import Touchstone results as points of a study",
    "fit": "fit surrogate models to a study's results",
    "ask": "instant what-if answers from a fitted surrogate",
    "tradeoff": "trade-off fronts between metrics",
    "yield": "yield of a design under print tolerances",
    "report": "an HTML report of a study: best designs, plots, trade-off, yield, cautions",
    "bench": "run the performance benchmarks",
    "init": "write a commented example design or study to start from",
}

_MODULES = {"import": "import_", "yield": "yield_"}
_PACKAGE_LOGGERS = ("studies", "sweeps", "surrogates")

log = logging.getLogger(__name__)


def verb_module_name(verb: str) -> str:
    """Dotted module name of a verb (``import`` lives in ``studies.verbs.import_``)."""
    return f"studies.verbs.{_MODULES.get(verb, verb)}"


class _UsageError(Exception):
    """A bad command line found before argparse ran (unknown or unavailable verb)."""


class _StderrHandler(logging.StreamHandler):  # type: ignore[type-arg]
    """Writes to whatever ``sys.stderr`` is at the time of the record (tests swap it)."""

    @property  # type: ignore[override]
    def stream(self):  # noqa: ANN201
        return sys.stderr

    @stream.setter
    def stream(self, value: object) -> None:
        pass


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("filamant")
    except PackageNotFoundError:
        return "0+unknown"


def _global_options(parser: argparse.ArgumentParser, *, suppress: bool) -> None:
    default = argparse.SUPPRESS if suppress else None
    parser.add_argument("--debug", action="store_true",
                        default=argparse.SUPPRESS if suppress else False,
                        help="show the traceback of an error")
    parser.add_argument("-v", "--verbose", action="count",
                        default=default if suppress else 0,
                        help="more log output on stderr (-v info, -vv debug)")


class _Parser(argparse.ArgumentParser):
    """argparse with the project's error style: one line on stderr, exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        _error(f"{self.prog}: {message} (see {self.prog} --help)")
        raise SystemExit(2)


def build_parser(verb: str | None = None, module: ModuleType | None = None
                 ) -> argparse.ArgumentParser:
    """The argument parser; only ``verb`` (if given) gets its arguments from ``module``."""
    parser = _Parser(
        prog="filamant",
        description="Design studies for 3-D-printed backscatter tags.",
        epilog="filamant VERB --help shows a verb's options and an example.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    _global_options(parser, suppress=False)
    parser.add_argument("--version", action="version", version=f"filamant {_version()}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB")
    for name, text in VERBS.items():
        if name != verb:
            sub.add_parser(name, help=text, add_help=False)
            continue
        example = getattr(module, "EXAMPLE", "")
        p = sub.add_parser(
            name, help=text, description=text[:1].upper() + text[1:] + ".",
            epilog=f"example:\n  {example}" if example else None,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        _global_options(p, suppress=True)
        if module is not None:
            module.add_arguments(p)
    return parser


def _find_verb(argv: Sequence[str]) -> str | None:
    for arg in argv:
        if arg == "--":
            return None
        if not arg.startswith("-"):
            return arg
    return None


def _load_verb(verb: str) -> ModuleType:
    if verb not in VERBS:
        raise _UsageError(f"unknown verb {verb!r}" + suggest(verb, VERBS))
    name = verb_module_name(verb)
    if importlib.util.find_spec(name) is None:
        raise _UsageError(f"{verb!r} is not available yet in this version")
    return importlib.import_module(name)


def _setup_logging(verbosity: int) -> logging.Handler:
    handler = _StderrHandler()
    handler.setFormatter(logging.Formatter("filamant: %(levelname)s: %(name)s: %(message)s"))
    level = logging.WARNING if verbosity <= 0 else logging.INFO if verbosity == 1 \
        else logging.DEBUG
    for name in _PACKAGE_LOGGERS:
        lg = logging.getLogger(name)
        lg.addHandler(handler)
        lg.setLevel(level)
    return handler


def _teardown_logging(handler: logging.Handler) -> None:
    for name in _PACKAGE_LOGGERS:
        lg = logging.getLogger(name)
        lg.removeHandler(handler)
        lg.setLevel(logging.NOTSET)


def _one_line(message: str) -> str:
    return " ".join(message.split("\n")).strip() or "(no message)"


def _error(message: str) -> None:
    sys.stderr.write(f"filamant: error: {_one_line(message)}\n")
    sys.stderr.flush()


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``filamant`` command line; returns the exit status.

    Parameters
    ----------
    argv : sequence of str, optional
        The arguments after the program name (default ``sys.argv[1:]``).

    Returns
    -------
    int
        0 success, 1 unexpected failure, 2 bad input or usage, 130 interrupted.
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in argv
    try:
        verb = _find_verb(argv)
        module = _load_verb(verb) if verb is not None else None
        parser = build_parser(verb, module)
        args = parser.parse_args(argv)
    except _UsageError as exc:
        _error(f"{exc} (filamant --help lists the verbs)")
        return 2
    except SystemExit as exc:  # argparse: --help, --version (0) or a usage error (2)
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)
    except Exception as exc:  # a verb module that fails to import
        return _unexpected(exc, debug)
    if module is None:
        _error("choose a verb (filamant --help lists them)")
        return 2

    debug = bool(getattr(args, "debug", False))
    handler = _setup_logging(int(getattr(args, "verbose", 0) or 0))
    try:
        code = module.run(args)
        sys.stdout.flush()
        return int(code or 0)
    except FilamantError as exc:
        if debug:
            traceback.print_exc()
        _error(str(exc))
        return 2
    except KeyboardInterrupt:
        _error("interrupted")
        return 130
    except BrokenPipeError:  # stdout closed early (| head): not an error of ours
        try:
            sys.stdout = open("/dev/null", "w")  # noqa: SIM115  (avoid a second error at exit)
        except OSError:
            pass
        return 1
    except Exception as exc:
        return _unexpected(exc, debug)
    finally:
        _teardown_logging(handler)


def _unexpected(exc: BaseException, debug: bool) -> int:
    if debug:
        traceback.print_exc()
        _error(f"{type(exc).__name__}: {exc}")
    else:
        _error(f"{type(exc).__name__}: {exc} (run with --debug for the traceback)")
    return 1


if __name__ == "__main__":
    sys.exit(main())
