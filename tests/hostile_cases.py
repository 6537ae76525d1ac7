"""The hostile generator: bad inputs made by mutating the bundled recipes, a chip file and
the command lines, each with the key (or option) its one-line refusal must name.

Grow it: a new bound is a row of ``RECIPE_MUTATIONS``, ``CHIP_MUTATIONS`` or ``OPTIONS``;
every row is applied to every bundled recipe it fits. Nothing here runs shaper.
"""

from __future__ import annotations

import copy
import json
import re
import tomllib
from pathlib import Path

from helpers import HOSTILE_CHIP, HOSTILE_PAIR

ROOT = Path(__file__).resolve().parents[1]
RECIPES = sorted((ROOT / "recipes").glob("*.toml"))


# ----- a small TOML writer (the standard library only reads TOML)

def dump(table: dict) -> str:
    """``table`` as TOML text (strings, numbers, booleans, lists, tables, arrays of tables)."""
    lines: list[str] = []
    _table(table, [], lines)
    return "\n".join(lines) + "\n"


def _key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def _is_tables(v) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def _table(table: dict, path: list[str], lines: list[str]) -> None:
    for k, v in table.items():
        if not isinstance(v, dict) and not _is_tables(v):
            lines.append(f"{_key(k)} = {_value(v)}")
    for k, v in table.items():
        here = [*path, _key(k)]
        if isinstance(v, dict):
            lines.append(f"\n[{'.'.join(here)}]")
            _table(v, here, lines)
        elif _is_tables(v):
            for item in v:
                lines.append(f"\n[[{'.'.join(here)}]]")
                _table(item, here, lines)


# ----- mutations: a dotted path with list indices, set to a value

def setting(raw: dict, path: str, value) -> dict | None:
    """A copy of ``raw`` with ``path`` (``"system.transmon[1].levels"``) set to ``value``;
    None where the path's parent does not exist (the mutation does not fit the recipe).
    Tables along the path that are missing are made (``optimizer``, ``verdict``)."""
    out = copy.deepcopy(raw)
    parts = re.findall(r"[^.\[\]]+|\[\d+\]", path)
    here = out
    for part, after in zip(parts, parts[1:], strict=False):
        if part.startswith("["):
            index = int(part[1:-1])
            if not isinstance(here, list) or index >= len(here):
                return None
            here = here[index]
        else:
            if not isinstance(here, dict):
                return None
            if part not in here:
                if after.startswith("["):
                    return None
                here[part] = {}
            here = here[part]
    last = parts[-1]
    if last.startswith("[") or not isinstance(here, dict):
        return None
    here[last] = value
    return out


def model_of(raw: dict) -> str:
    return raw.get("system", {}).get("model", "")


# (id, path, value, the models it fits ("" = every, "lab" = the transmon models, which the
# verdict also plays in the lab frame), the key the message names, a word of the reason);
# {i} in a path is each transmon of a "transmons" model
RECIPE_MUTATIONS = [
    ("bandwidth-zero", "pulse.bandwidth", "0 MHz", "", "pulse.bandwidth", "positive"),
    ("target-infidelity-5", "optimizer.target_infidelity", 5, "", "optimizer.target_infidelity",
     "below 1"),
    ("target-leakage-1", "optimizer.target_leakage", 1.0, "", "optimizer.target_leakage",
     "below 1"),
    ("target-leakage-0", "optimizer.target_leakage", 0, "", "optimizer.target_leakage",
     "positive"),
    ("starts-billion", "optimizer.starts", 1_000_000_000, "", "optimizer.starts", "at most"),
    ("starts-float", "optimizer.starts", 1e9, "", "optimizer.starts", "whole number"),
    ("seed-negative", "optimizer.seed", -1, "", "optimizer.seed", "at least 0"),
    ("seed-huge", "optimizer.seed", 2 ** 40, "", "optimizer.seed", "at most"),
    ("initial-missing", "optimizer.initial", "missing.csv", "", "optimizer.initial",
     "no such file"),
    ("granularity-million", "export.granularity", 1_000_000, "lab", "export.granularity",
     "granularity"),  # too long to judge, or (pairs) too big for the memory first
    ("extra-levels-9", "verdict.extra_levels", 9, "", "verdict.extra_levels", "at most 8"),
    ("qubit-frequency-1e30", "system.qubit_frequency", 1e30, "transmon",
     "system.qubit_frequency", "beyond any transmon"),
    ("drive-frequency-terahertz", "system.drive_frequency", "1 THz", "transmon",
     "system.drive_frequency", "beyond any transmon"),
    # the levels the verdict re-checks (levels + extra_levels) past what the spectrum
    # keeps: 64 on the Duffing ladder, 40 bound levels of the charge model (the default)
    ("levels-64-extra-8", "system.levels", 64, "transmon", "verdict.extra_levels", "72"),
    ("levels-36-extra-8", "system.levels", 36, "transmon", "verdict.extra_levels", "44"),
    ("levels-41", "system.levels", 41, "transmon", "system.levels", "at most 40"),
    ("transmon-frequency-1e30", "system.transmon[{i}].qubit_frequency", 1e30, "transmons",
     "system.transmon[{i}].qubit_frequency", "beyond any transmon"),
    ("transmon-levels-63", "system.transmon[{i}].levels", 63, "transmons",
     "system.transmon[{i}].levels", "65 levels"),
    ("transmon-levels-39", "system.transmon[{i}].levels", 39, "transmons",
     "system.transmon[{i}].levels", "41 levels"),
    ("transmon-levels-41", "system.transmon[{i}].levels", 41, "transmons",
     "system.transmon[{i}].levels", "spectrum = \"duffing\""),
    ("frame-terahertz", "system.frame_frequency", "1 THz", "transmons",
     "system.frame_frequency", "beyond any transmon"),
    ("max-rabi-terahertz", "pulse.max_rabi", "1 THz", "transmon", "pulse.max_rabi",
     "beyond any transmon"),
    ("duration-a-millisecond", "pulse.duration", "1 ms", "transmon", "pulse.duration", ""),
    # found by the fresh trial after the first fixes
    ("anharmonicity-1e30", "system.anharmonicity", 1e30, "transmon", "system.anharmonicity",
     "smaller in size"),
    ("transmon-anharmonicity-6-ghz", "system.transmon[{i}].anharmonicity", "-6 GHz",
     "transmons", "system.transmon[{i}].anharmonicity", "smaller in size"),
    ("out-of-band-5", "pulse.max_out_of_band", 5, "", "pulse.max_out_of_band", "below 1"),
    ("ensemble-of-1000", "cost.ensemble_scales", [1.0] * 1000, "", "cost.ensemble_scales",
     "at most 100"),
    ("ensemble-detuning-1e30", "cost.ensemble_detunings", ["1e30 Hz"], "",
     "cost.ensemble_detunings[0]", "1 GHz"),
    ("learning-rate-1e300", "optimizer.learning_rate", 1e300, "", "optimizer.learning_rate",
     "at most 10"),
    ("t1-attosecond", "system.t1", "1e-30 s", "transmon", "system.t1", "nanosecond"),
]
# further changes of a case ({i} as in its path): 64 and 63 levels are Duffing ladders
# (the charge model keeps 40, refused by levels-41 and transmon-levels-41)
EXTRA = {"levels-64-extra-8": [("verdict.extra_levels", 8), ("system.spectrum", "duffing")],
         "levels-36-extra-8": [("verdict.extra_levels", 8)],
         "transmon-levels-63": [("system.transmon[{i}].spectrum", "duffing")]}


def recipe_cases():
    """``(id, recipe file text, key, reason)`` for every mutation that fits every bundled
    recipe."""
    for path in RECIPES:
        raw = tomllib.loads(path.read_text())
        transmons = len(raw.get("system", {}).get("transmon", []))
        for case, where, value, model, key, reason in RECIPE_MUTATIONS:
            if model and model_of(raw) not in ({"transmon", "transmons"} if model == "lab"
                                               else {model}):
                continue
            for i in range(transmons) if "{i}" in where else [None]:
                out = setting(raw, where.format(i=i), value)
                for also, more in EXTRA.get(case, []):
                    if out is not None:
                        out = setting(out, also.format(i=i), more)
                if out is not None:
                    yield (f"{path.stem}-{case}" + ("" if i is None else f"-{i}"), dump(out),
                           key.format(i=i), reason)


CHIP = HOSTILE_CHIP + HOSTILE_PAIR

# (id, path in the chip file, value, the key the message names, a word of the reason): a
# chip's qubit is named by its name, the template by template.<section>.<key>
CHIP_MUTATIONS = [
    ("second-qubit-levels", "qubit[1].levels", 100, 'qubit "qb".levels', "from 2"),
    ("second-qubit-frequency", "qubit[1].frequency", 1e30, 'qubit "qb".frequency',
     "beyond any transmon"),
    ("second-qubit-t2", "qubit[1].t2", "900 us", 'qubit "qb".t2', "T2 <= 2 T1"),
    ("first-qubit-max-rabi", "qubit[0].max_rabi", "1 THz", 'qubit "qa".max_rabi',
     "beyond any transmon"),
    ("flux-range-huge", "qubit[1].flux_range", ["-900 GHz", 0], 'qubit "qb".flux_range',
     "beyond"),
    ("template-target", "template.optimizer.target_infidelity", 5,
     "template.optimizer.target_infidelity", "below 1"),
    ("template-bandwidth-zero", "template.pulse.bandwidth", "0 MHz", "template.pulse.bandwidth",
     "positive"),
    ("template-starts", "template.optimizer.starts", 100000, "template.optimizer.starts",
     "at most"),
    ("template-extra-levels", "template.verdict.extra_levels", 8,
     "template.verdict.extra_levels", "44 levels"),
    ("first-qubit-levels-charge", "qubit[0].levels", 41, 'qubit "qa".levels', "at most 40"),
    ("template-granularity", "template.export.granularity", 1_000_000,
     "template.export.granularity", "granularity"),  # too long to judge, or too big for
    # this machine's memory first (which one depends on the machine)
    ("neighbour-levels", "gates.neighbour_levels", 40, "gates.neighbour_levels", "from 2"),
    ("coupling-strength", "coupling[0].strength", "2 GHz", "coupling[0].strength", "above"),
    ("cross-resonance-rabi", "gates.cross_resonance_rabi", "0 MHz",
     "gates.cross_resonance_rabi", "positive"),
    # found by the fresh trial after the first fixes
    ("template-initial-missing", "template.optimizer.initial", "missing.csv",
     "template.optimizer.initial", "no such file"),
    ("second-qubit-anharmonicity", "qubit[1].anharmonicity", "90 GHz",
     'qubit "qb".anharmonicity', "smaller in size"),
]
CHIP_EXTRA = {"second-qubit-t2": ("qubit[1].t1", "40 us"),
              "template-extra-levels": ("qubit[0].levels", 36)}  # 36 + 8 > the charge model's 40


def chip_cases():
    """``(id, chip file text, key, reason)``."""
    raw = tomllib.loads(CHIP)
    for case, where, value, key, reason in CHIP_MUTATIONS:
        out = setting(raw, where, value)
        if case in CHIP_EXTRA:
            out = setting(out, *CHIP_EXTRA[case])
        yield case, dump(out), key, reason


LONG_OUT = "x" * 300
# (id, the command line after "shaper" with RECIPE, CHIP, WAVE and RUN in place, the
# option the message names, a word of the reason)
OPTIONS = [
    ("optimize-seed-negative", ["optimize", "RECIPE", "--seed", "-1"], "--seed", "from 0"),
    ("optimize-workers-zero", ["optimize", "RECIPE", "--workers", "0"], "--workers", "from 1"),
    ("optimize-workers-many", ["optimize", "RECIPE", "--workers", "100000"], "--workers",
     "per core"),
    ("optimize-starts", ["optimize", "RECIPE", "--starts", "100000"], "--starts", "1,000"),
    ("optimize-long-out", ["optimize", "RECIPE", "--out", LONG_OUT], "--out", "255"),
    ("optimize-checkpoint-nan", ["optimize", "RECIPE", "--checkpoint-seconds", "nan"],
     "--checkpoint-seconds", "positive"),
    ("sweep-workers-zero", ["sweep", "RECIPE", "--durations", "10ns", "--workers", "0"],
     "--workers", "from 1"),
    ("sweep-seed-negative", ["sweep", "RECIPE", "--durations", "10ns", "--seed", "-1"],
     "--seed", "from 0"),
    ("chip-workers-zero", ["chip", "CHIP", "--workers", "0"], "--workers", "from 1"),
    ("chip-wait-without-scheduler", ["chip", "CHIP", "--wait-workers", "1min"],
     "--wait-workers", "--scheduler"),
    ("chip-scheduler-no-port", ["chip", "CHIP", "--scheduler", "127.0.0.1"], "--scheduler",
     "port"),
    ("chip-scheduler-http", ["chip", "CHIP", "--scheduler", "http://127.0.0.1:8787"],
     "--scheduler", "dashboard"),
    ("chip-scheduler-port-range", ["chip", "CHIP", "--scheduler", "tcp://127.0.0.1:99999"],
     "--scheduler", "port"),
    ("chip-long-out", ["chip", "CHIP", "--out", LONG_OUT], "--out", "255"),
    ("check-levels-100", ["check", "RECIPE", "WAVE", "--levels", "100"], "--levels 100",
     "from 2"),
    ("check-levels-1", ["check", "RECIPE", "WAVE", "--levels", "1"], "--levels", "at least 2"),
    ("check-t2-over-2-t1", ["check", "RECIPE", "WAVE", "--t1", "5us", "--t2", "11us"],
     "--t2 11us", "'5us'"),
    ("check-t1-bare", ["check", "RECIPE", "WAVE", "--t1", "40"], "--t1", "40 us"),
    ("check-scale-span", ["check", "RECIPE", "WAVE", "--scale-span", "2"], "--scale-span",
     "between 0 and 1"),
    ("check-long-plots", ["check", "RECIPE", "WAVE", "--plots", LONG_OUT], "--plots", "255"),
    ("export-granularity-million", ["export", "RUN", "--out", "OUT", "--granularity",
                                    "1000000"], "--granularity", "10 min"),
    ("export-long-out", ["export", "RUN", "--out", LONG_OUT], "--out", "255"),
    # found by the fresh trial after the first fixes
    ("chip-scheduler-empty", ["chip", "CHIP", "--scheduler", ""], "--scheduler", "address"),
    ("optimize-stall-tiny", ["optimize", "RECIPE", "--stall-limit", "1e-300 s"],
     "--stall-limit", "from 1 s"),
    ("check-sample-rate-1e300", ["check", "RECIPE", "WAVE", "--sample-rate", "1e300"],
     "--sample-rate", "at most"),
    ("check-rate-against-sidecar", ["check", "RECIPE", "WAVE", "--sample-rate", "2GS/s"],
     "--sample-rate 2GS/s", "sidecar"),
    # found by the second trial: the longest duration of a sweep is checked before the first
    ("sweep-durations-too-long", ["sweep", "RECIPE", "--durations", "100us:3ms:100us"],
     "--durations 100us:3ms:100us", ""),
]
