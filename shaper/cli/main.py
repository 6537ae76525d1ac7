"""Entry point of the ``shaper`` command: parse, dispatch, turn user errors into exit 2.

JAX is imported inside the commands, so ``shaper --help`` and ``--version`` stay fast.
"""

from __future__ import annotations

import os

# One BLAS thread per process, set before NumPy loads (its OpenBLAS reads this once): an
# idle BLAS thread spins beside every small-matrix loop and doubled a lab-frame
# optimisation's CPU per iteration (50 against 27 ms, measured); worker processes inherit
# it. A value the user set is kept.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import errno  # noqa: E402
import sys  # noqa: E402
from importlib import import_module, metadata  # noqa: E402

COMMANDS = {
    "optimize": ("shaper.cli.optimize_cmd", "optimise the pulse a recipe describes and export it"),
    "sweep": ("shaper.cli.sweep_cmd", "find the shortest duration that meets the targets"),
    "chip": ("shaper.cli.chip_cmd", "every gate of a chip at its shortest duration, locally "
                                    "or on a Dask cluster"),
    "check": ("shaper.cli.check_cmd", "simulate any waveform on a recipe's system and judge it"),
    "benchmark": ("shaper.cli.benchmark_cmd", "predict the randomized benchmarking of a set "
                                              "of files (a qubit's gates)"),
    "export": ("shaper.cli.export_cmd", "re-export an earlier run for another instrument"),
    "bench": ("shaper.cli.bench_cmd", "time the propagator's value and gradient against a "
                                      "SciPy reference"),
}


ALIASES = {"optimize": ["optimise"]}  # other spellings taken; ours is the one printed


def _version() -> str:
    try:
        return metadata.version("shaper")
    except metadata.PackageNotFoundError:
        return "unknown"


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit 2): the option and what is wrong, no usage
    block (``--help`` has it)."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: error: {one_line(message)} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="shaper",
        description="Optimal-control pulse shaping for qubit gates: a recipe in, AWG "
                    "waveforms and a report out.")
    parser.add_argument("--version", action="version", version=f"shaper {_version()}")
    parser.add_argument("--debug", action="store_true",
                        help="show the Python traceback of an error instead of one line")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (module, help_text) in COMMANDS.items():
        cmd = sub.add_parser(name, help=help_text, description=help_text,
                             aliases=ALIASES.get(name, []))
        import_module(module).add_arguments(cmd)
    return parser


def entry() -> None:
    """The ``shaper`` command: :func:`main`, then a quick exit.

    Once JAX has run, the interpreter's own teardown (XLA's client and thread pools,
    every module's objects) takes 0.6-0.8 s on a 2-core machine after the command's work
    is done and written. Every file a command writes is closed (atomically renamed)
    before :func:`main` returns, so the process flushes its streams and logs and leaves
    without that teardown.
    """
    code = main()
    if "jax" not in sys.modules:
        sys.exit(code)
    import logging
    import os

    logging.shutdown()
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(code)


def main(argv: list[str] | None = None) -> int:
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
    except KeyboardInterrupt:  # before any command began: nothing to save
        return 130
    if not args.command:
        parser.print_help()
        return 2
    args.command = next((name for name, others in ALIASES.items() if args.command in others),
                        args.command)  # "optimise" runs, and speaks, as "optimize"
    try:
        return int(import_module(COMMANDS[args.command][0]).run(args) or 0)
    except KeyboardInterrupt:
        print(f"shaper {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:
        if args.debug:
            raise
        code, text = explain(exc)
        print(f"shaper {args.command}: {one_line(text)}", file=sys.stderr)
        return code


def explain(exc: Exception) -> tuple[int, str]:
    """The exit code and the one line for an error (README, "Commands"): 2 bad input,
    3 the machine failed the run, 4 a bug in shaper."""
    from shaper.errors import ShaperError

    if isinstance(exc, ShaperError):
        return exc.exit_code, f"error: {exc}"
    first = str(exc).splitlines()[0][:300] if str(exc) else ""
    if isinstance(exc, MemoryError) or "RESOURCE_EXHAUSTED" in first:
        return 3, ("error: out of memory; use fewer levels, samples or ensemble members"
                   + (f" ({first})" if first else ""))
    if isinstance(exc, OSError):  # a full disk, no permission: the machine's part
        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        if exc.errno == errno.ENAMETOOLONG:  # a name the user gave, too long to exist
            return 2, f"error: {exc.strerror}{where}"
        return 3, f"error: {exc.strerror or exc}{where}"
    return 4, (f"internal error: {type(exc).__name__}: {first}. This is a bug in shaper; run "
               f"again as 'shaper --debug ...' and report the traceback")


MAX_LINE = 2000  # characters of an error line: a path and a sentence fit with room


def one_line(text: str) -> str:
    """An error as one line of printable text: line breaks become spaces, other control
    characters are escaped (a message may quote a name or value from a file), cut at
    :data:`MAX_LINE` characters."""
    text = " ".join(text.split("\n"))
    text = "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)
    return text if len(text) <= MAX_LINE else text[:MAX_LINE] + "..."


if __name__ == "__main__":
    sys.exit(main())
