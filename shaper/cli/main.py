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
    "check": ("shaper.cli.check_cmd", "simulate any waveform on a recipe's system and judge it"),
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
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (module, help_text) in COMMANDS.items():
        cmd = sub.add_parser(name, help=help_text, description=help_text)
        import_module(module).add_arguments(cmd)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return 2
    from shaper.errors import ShaperError

    try:
        return int(import_module(COMMANDS[args.command][0]).run(args) or 0)
    except ShaperError as exc:
        print(f"shaper {args.command}: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"shaper {args.command}: interrupted", file=sys.stderr)
        return 130
    except MemoryError:
        print(f"shaper {args.command}: error: out of memory; use fewer levels, samples or "
              f"ensemble members", file=sys.stderr)
        return 3
    except OSError as exc:  # a full disk, no permission, a missing folder: the machine's part
        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        print(f"shaper {args.command}: error: {exc.strerror or exc}{where}", file=sys.stderr)
        return 3


if __name__ == "__main__":
    sys.exit(main())
