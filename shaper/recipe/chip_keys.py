"""A gate task's recipe error, named by the key the chip file wrote (README, "Chips").

Every task of a chip is an ordinary recipe built from the chip's qubits, couplings and
template, and checked by the recipe reader; its errors name the recipe's keys
(``system.transmon[1].levels``, ``optimizer.target_infidelity``). The user wrote the
chip, not that recipe: :func:`chip_key` turns the recipe's key into the chip's own
(``qubit "qb".levels``, ``template.optimizer.target_infidelity``), so an error in a
neighbour or in the template is not reported under the qubit whose recipe found it.
Nothing here imports JAX.
"""

from __future__ import annotations

import re

# a transmon's recipe key -> the chip's [[qubit]] key
QUBIT_KEYS = {"qubit_frequency": "frequency", "anharmonicity": "anharmonicity",
              "levels": "levels", "t1": "t1", "t2": "t2", "spectrum": "spectrum",
              "offset_charge": "offset_charge", "flux": "flux"}
TEMPLATE_SECTIONS = ("cost", "optimizer", "export", "verdict", "line", "awg")


def qubit_key(name: str, field: str = "") -> str:
    """How a chip error names a qubit's key: ``qubit "qa".frequency`` (by its name)."""
    return f'qubit "{name}"' + (f".{field}" if field else "")


def chip_key(recipe: dict, key: str | None, durations_key: str,
             couplings: list) -> str | None:
    """The chip file's key for the error a task's ``recipe`` gave at ``key``, or None
    where the recipe's key has no counterpart in the chip file.

    ``durations_key``: the ``[gates]`` key of the task's durations; ``couplings``: the
    chip's ``[[coupling]]`` tables (a pair's coupling is named by its index there).
    """
    if not key:
        return None
    head, _, rest = key.partition(".")
    if head in TEMPLATE_SECTIONS:
        return f"template.{key}"
    if head == "pulse":
        return _pulse_key(recipe, rest, durations_key)
    if head == "system":
        return _system_key(recipe.get("system", {}), rest, couplings)
    return None


def _subject(system: dict) -> str | None:
    """The driven qubit of a one-qubit task (its own recipe or its neighbourhood's)."""
    if system.get("model") == "transmon":
        return system.get("qubit")
    transmons = system.get("transmon") or [{}]
    return transmons[0].get("name")


def _pulse_key(recipe: dict, rest: str, durations_key: str) -> str:
    field, _, channel = rest.partition(".")
    field, channel = field.split("[")[0], channel.split("[")[0]
    if field == "duration":
        return durations_key
    if field == "max_rabi":
        if channel.endswith("_cr"):
            return "gates.cross_resonance_rabi"
        name = channel or _subject(recipe.get("system", {}))
        return qubit_key(name, "max_rabi") if name else "template.pulse.max_rabi"
    if field in ("max_flux", "flux_range") and channel.endswith("_flux"):
        return qubit_key(channel.removesuffix("_flux"), field)
    return f"template.pulse.{rest}"


def _system_key(system: dict, rest: str, couplings: list) -> str | None:
    transmons = system.get("transmon") or []
    if system.get("model") == "transmon":
        field = rest.split(".")[0].split("[")[0]
        name = system.get("qubit")
        return qubit_key(name, QUBIT_KEYS.get(field, "")) if name else None
    found = re.match(r"transmon\[(\d+)\]\.?([a-z_0-9]*)", rest)
    if found and int(found[1]) < len(transmons):
        table = transmons[int(found[1])]
        if found[2] == "levels" and table.get("driven") is False:  # a neighbour's levels
            return "gates.neighbour_levels"
        return qubit_key(table.get("name", ""), QUBIT_KEYS.get(found[2], ""))
    found = re.match(r"coupling\[(\d+)\]\.?([a-z_0-9]*)", rest)
    if found and int(found[1]) < len(system.get("coupling") or []):
        pair = set(system["coupling"][int(found[1])].get("between", []))
        for i, c in enumerate(couplings):
            if isinstance(c, dict) and set(c.get("between") or []) == pair:
                return f"coupling[{i}]" + (f".{found[2]}" if found[2] else "")
    if rest in ("frame_frequency", "drive") or rest.startswith("drive["):
        # a cross-resonance tone and its frame sit at the target (second) qubit's frequency
        return qubit_key(transmons[-1]["name"], "frequency") if transmons else None
    return None
