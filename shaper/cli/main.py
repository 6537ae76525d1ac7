"""Entry point of the ``shaper`` command: parse, dispatch, turn user errors into exit 2.

JAX is imported inside the commands, so ``shaper --help`` and ``--version`` stay fast.
"""

from __future__ import annotations

import argparse
import sys
from importlib import import_module, metadata

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


def _version() -> str:
    try:
        return metadata.version("shaper")
    except metadata.PackageNotFoundError:
        return "unknown"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="shaper",
        description="Optimal-control pulse shaping for qubit gates: a recipe in, AWG "
                    "waveforms and a report out.")
    parser.add_argument("--version", action="version", version=f"shaper {_version()}")
    parser.add_argument("--debug", action="store_true",
                        help="show the Python traceback of an error instead of one line")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (module, help_text) in COMMANDS.items():
        cmd = sub.add_parser(name, help=help_text, description=help_text)
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
    try:
        return int(import_module(COMMANDS[args.command][0]).run(args) or 0)
    except KeyboardInterrupt:
        print(f"shaper {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:
        if args.debug:
            raise
        code, text = explain(exc)
        print(f"shaper {args.command}: {text}", file=sys.stderr)
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
        return 3, f"error: {exc.strerror or exc}{where}"
    return 4, (f"internal error: {type(exc).__name__}: {first}. This is a bug in shaper; run "
               f"again as 'shaper --debug ...' and report the traceback")


if __name__ == "__main__":
    sys.exit(main())
