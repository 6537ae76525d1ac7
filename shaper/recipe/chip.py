"""Chip descriptions: one TOML file for a whole device, read into one recipe per gate task.

A chip lists its qubits (frequency, anharmonicity, levels, drive limit, coherence times
where known, fixed or flux-tunable) and couplings, and a gate template: the gates every
qubit needs, the two-qubit gate of every coupled pair, the durations to sweep and the
recipe tables every gate's recipe starts from (README, "Chips"). Each task is an ordinary
recipe, checked by the recipe reader, so a chip error names the chip's own key. Nothing
here imports JAX.
"""

from __future__ import annotations

import copy
import hashlib
import json
from dataclasses import dataclass, replace
from pathlib import Path

from shaper.errors import RecipeError
from shaper.physics.systems import NAME, NAME_RULE
from shaper.physics.targets import plan, slug
from shaper.recipe.chip_gates import NO_GATE, read_gates
from shaper.recipe.chip_keys import chip_key, qubit_key
from shaper.recipe.files import check_line_files
from shaper.recipe.lines import resolve_files, stage_files
from shaper.recipe.neighbours import near_recipe, near_system, read_crosstalk
from shaper.recipe.schema import _Reader

CHIP_KEYS = {
    "": ("name", "description", "gates", "template", "qubit", "coupling", "crosstalk"),
    "gates": ("single", "single_durations", "pair", "pair_durations", "fixed_pair",
              "fixed_pair_durations", "cross_resonance_rabi", "neighbours", "neighbour_levels",
              "simultaneous"),
    "template": ("pulse", "cost", "optimizer", "export", "line", "awg", "verdict"),
    "qubit": ("name", "frequency", "anharmonicity", "levels", "max_rabi", "t1", "t2", "flux",
              "max_flux", "flux_range", "spectrum", "offset_charge"),
    "coupling": ("between", "strength"),
    "crosstalk": ("from", "to", "ratio"),
}
MAX_QUBITS = 200


@dataclass(frozen=True)
class Task:
    """One optimisation of a chip run: a sweep over ``durations`` of ``recipe`` (a raw
    recipe whose target is ``parent``), with the gates ``derived`` from it."""

    id: str
    subject: str  # the qubit, or "qa-qb" for a pair
    parent: str
    derived: tuple[tuple[str, float], ...]
    recipe: dict
    durations: str
    durations_key: str = "gates.single_durations"  # where the chip file sets them
    # a single-qubit gate of a qubit with neighbours (README, "Chips: neighbours"): the
    # recipe it is played on besides its own, alone (optimised in the neighbourhood) or
    # in its neighbourhood (optimised alone); None: no other
    alone: dict | None = None
    near: dict | None = None
    # where the user ran it ({"command": "chip", "file": the chip file}, or a gate set's
    # sweep), so that a miss's next step is that command (shaper.jobs.next_steps.Where);
    # not part of the digest
    where: dict | None = None

    @property
    def alone_recipe(self) -> dict:
        """The gate's recipe on its own qubit or pair (not a neighbourhood)."""
        return self.alone or self.recipe

    @property
    def digest(self) -> str:
        """What the task computes: a changed qubit, template or response file changes it
        (and redoes it)."""
        what = {"recipe": self.recipe, "durations": self.durations, "derived": self.derived}
        files = _response_files(self.recipe)
        if files:
            what["files"] = files
        return hashlib.sha256(json.dumps(what, sort_keys=True).encode()).hexdigest()


def _response_files(recipe: dict) -> dict[str, str]:
    """The sha256 of every measured-response file the recipe's line names (absolute)."""
    from shaper.errors import InputError
    from shaper.recipe.files import read_bytes
    from shaper.recipe.lines import MAX_RESPONSE_BYTES

    def unreadable(message: str):
        raise InputError(message)
    out = {}
    for stage in stage_files(recipe.get("line", {})):
        try:  # read and checked by the recipe reader already; bounded here all the same
            data = read_bytes(stage["file"], MAX_RESPONSE_BYTES, unreadable, text=False)
            out[stage["file"]] = hashlib.sha256(data).hexdigest()
        except InputError:
            out[stage["file"]] = "unreadable"
    return out


@dataclass(frozen=True)
class Chip:
    name: str
    path: str | None
    sha256: str
    qubits: tuple[str, ...]
    pairs: tuple[tuple[str, str], ...]
    tasks: tuple[Task, ...]
    simultaneous: bool = False  # [gates] simultaneous: play neighbours' gates at once
    crosstalk: tuple[tuple[str, str, complex], ...] = ()  # (from, to, amplitude ratio)
    couplings: tuple[tuple[str, str, str], ...] = ()  # (a, b, strength as written)


def _check(r: _Reader, table: dict, section: str, where: str) -> None:
    r.check_keys(table, section, where, keys=CHIP_KEYS)


def load_chip(path: str | Path) -> Chip:
    """Read and check a chip file; build (and check) every task's recipe.

    Every key is checked (type, range, meaning) here, before any task runs, whether or not
    the chip uses it (a pair gate on a chip without pairs is still refused if wrong).

    Raises:
        RecipeError: naming the chip file and the key.
    """
    from shaper.recipe.load import read_toml

    path = Path(path)
    raw, text = read_toml(path, "chip")
    r = _Reader(raw, str(path))
    _check(r, raw, "", "")
    name = raw.get("name")
    if not isinstance(name, str) or not NAME.fullmatch(name):
        r.fail("name", f"expected {NAME_RULE}, got {str(name)[:60]!r}")
    gates = read_gates(r, r.table(raw, "gates", "gates"), CHIP_KEYS)
    template = _template(r, r.table(raw, "template", "template"), raw)
    specs = _qubits(r, raw)
    pairs = _pairs(r, raw, specs)
    tasks = _tasks(r, raw, specs, pairs, gates["single"], gates, template,
                   raw.get("coupling", []))
    tasks = [replace(task, where={"command": "chip", "file": str(path)}) for task in tasks]
    return Chip(name=name, path=str(path), sha256=hashlib.sha256(text).hexdigest(),
                qubits=tuple(specs), pairs=tuple(pairs), tasks=tuple(tasks),
                simultaneous=gates["simultaneous"],
                couplings=tuple((a, b, str(c["strength"])) for (a, b), c in
                                zip(pairs, raw.get("coupling", []), strict=True)),
                crosstalk=read_crosstalk(r, raw, specs, CHIP_KEYS))


# set per qubit or per gate task by the chip, so a template may not set them
TEMPLATE_PULSE_OWN = ("duration", "max_rabi", "max_flux", "flux_range")


def _channel_names(raw: dict) -> list[str]:
    """Every channel a task of this chip can have: each qubit's drive, flux line (tunable)
    and cross-resonance tone (for a fixed pair)."""
    out = []
    for q in raw.get("qubit", []) if isinstance(raw.get("qubit"), list) else []:
        if isinstance(q, dict) and isinstance(q.get("name"), str):
            out += [q["name"], f"{q['name']}_flux", f"{q['name']}_cr"]
    return out


def _template(r: _Reader, template: dict, raw: dict) -> dict:
    _check(r, template, "template", "template")
    for key, value in template.items():
        if not isinstance(value, dict):
            r.fail(f"template.{key}", f"expected a table [template.{key}]")
    base = Path(r.path).parent if r.path else Path.cwd()
    channels = _channel_names(raw)
    for channel in template.get("line", {}):
        if channel != "oversample" and channel not in channels:
            r.fail(f"template.line.{channel}", f"no channel of that name on this chip; "
                                               f"channels: {', '.join(channels)}")
    # found beside the chip file, wherever the task runs (README, "Chips")
    check_line_files(template.get("line"), base, "template.line", r.fail)
    resolve_files(template.get("line", {}), base)
    if isinstance(template.get("awg"), dict):  # a measured output response, beside the chip
        check_line_files({"awg": template["awg"]}, base, "template", r.fail)
        resolve_files({"awg": template["awg"]}, base)
    from shaper.recipe.load import check_first_guess
    found = check_first_guess(r, template.get("optimizer", {}).get("initial"), base,
                              "template.optimizer.initial")
    if found is not None:  # the workers find it wherever they run
        template["optimizer"]["initial"] = str(found.resolve())
    for key in TEMPLATE_PULSE_OWN:
        if key in template.get("pulse", {}):
            r.fail(f"template.pulse.{key}", "set by the chip for each gate (the qubits' "
                                            "max_rabi, max_flux, flux_range; [gates] "
                                            "*_durations); remove it from the template")
    return template


def _qubits(r: _Reader, raw: dict) -> dict[str, dict]:
    qubits = raw.get("qubit")
    if not isinstance(qubits, list) or not qubits:
        r.fail("qubit", "expected one or more [[qubit]] tables")
    if len(qubits) > MAX_QUBITS:
        r.fail("qubit", f"{len(qubits)} qubits; at most {MAX_QUBITS}")
    specs = {}
    for where, q in r.tables(raw, "qubit", "qubit", "qubit", keys=CHIP_KEYS):
        qname = q.get("name")
        if not isinstance(qname, str) or not NAME.fullmatch(qname):
            r.fail(f"{where}.name", f"expected {NAME_RULE}, got {qname!r}")
        if qname in specs:
            r.fail(f"{where}.name", f"qubit {qname!r} is listed twice; names must differ")
        where = qubit_key(qname)  # from here on the qubit is named by its name
        for key in ("frequency", "anharmonicity", "max_rabi"):
            if key not in q:
                r.fail(f"{where}.{key}", f"missing required key (qubit {qname!r})")
        tunable = r.flag(q, "flux", f"{where}.flux", False)
        if tunable and "max_flux" not in q and "flux_range" not in q:
            r.fail(f"{where}.max_flux", f"qubit {qname!r} is tunable (flux = true) and needs "
                                        f"a flux limit: max_flux or flux_range")
        for key in ("max_flux", "flux_range"):
            if key in q and not tunable:
                r.fail(f"{where}.{key}", f"qubit {qname!r} is fixed (no flux = true); only a "
                                         f"tunable qubit has a flux limit")
        specs[qname] = q
    return specs


def _pairs(r: _Reader, raw: dict, specs: dict) -> list[tuple[str, str]]:
    pairs = []
    for where, c in r.tables(raw, "coupling", "coupling", "coupling", keys=CHIP_KEYS):
        between = c.get("between")
        if not (isinstance(between, list) and len(between) == 2
                and all(isinstance(nm, str) for nm in between)):
            r.fail(f"{where}.between", f"expected two qubit names, got {str(between)[:60]!r}")
        for nm in between:
            if nm not in specs:
                r.fail(f"{where}.between", f"no qubit named {nm!r}; qubits: "
                                           f"{', '.join(specs)}")
        if between[0] == between[1] or tuple(between) in pairs or tuple(between[::-1]) in pairs:
            r.fail(f"{where}.between", f"{between}: a pair of two different qubits, once")
        if "strength" not in c:
            r.fail(f"{where}.strength", "missing required key")
        pairs.append((between[0], between[1]))
    return pairs


# levels per transmon unless a qubit says: 4 keeps the bundled chip's gates within their
# targets when the verdict re-checks them with 2 more (3 did not: README, "Chips")
CHIP_LEVELS = 4


def _transmon(q: dict) -> dict:
    out = {"name": q["name"], "levels": q.get("levels", CHIP_LEVELS),
           "qubit_frequency": q["frequency"], "anharmonicity": q["anharmonicity"]}
    for key in ("t1", "t2", "spectrum", "offset_charge"):
        if key in q:
            out[key] = q[key]
    return out


def _flux_probe(q: dict) -> dict:
    """A one-transmon recipe carrying a tunable qubit's flux keys, for the recipe reader to
    check them whether or not a pair uses the qubit."""
    flux = f"{q['name']}_flux"
    pulse = {"duration": "40 ns", "sample_rate": "2.4 GS/s", "max_rabi": {q["name"]: 0}}
    for key in ("max_flux", "flux_range"):
        if key in q:
            pulse[key] = {flux: q[key]}
    return {"name": "probe", "system": {"model": "transmons",
                                        "transmon": [{**_transmon(q), "flux": True}]},
            "gate": {"target": "I"}, "pulse": pulse}


def _cross_resonance(r, name, i, qa, qb, coupling, gates, base, checked) -> Task:
    """A fixed-frequency pair: the first qubit controls, a tone at the second's frequency on
    its line (cross-resonance), the second's own drive; the frame at the second's frequency
    (README, "Two-qubit gates on fixed-frequency pairs")."""
    a, b = qa["name"], qb["name"]
    gate = gates["fixed_pair"]
    recipe_channels = [a, b, f"{a}_cr"]
    recipe = {"name": f"{name}-{a}-{b}-{slug(gate)}",
              "system": {"model": "transmons", "frame_frequency": qb["frequency"],
                         "transmon": [_transmon(qa), _transmon(qb)],
                         "coupling": [{"between": [a, b], "strength": coupling["strength"]}],
                         "drive": [{"name": f"{a}_cr", "transmon": a,
                                    "frequency": qb["frequency"]}]},
              "gate": {"target": gate, "virtual_z": True},
              "pulse": {**base.get("pulse", {}), "duration": "160 ns",
                        "max_rabi": {a: 0, b: qb["max_rabi"],
                                     f"{a}_cr": gates.get("cross_resonance_rabi", "100 MHz")}},
              **_rest(base, recipe_channels)}
    recipe["pulse"].setdefault("sample_rate", "2.4 GS/s")
    return Task(f"{a}-{b}-{slug(gate)}", f"{a}-{b}", gate, (),
                checked(recipe, f"coupling[{i}]", "gates.fixed_pair_durations"),
                gates["fixed_pair_durations"], "gates.fixed_pair_durations")


def _checker(r: _Reader, couplings: list):
    """``checked(recipe, where, durations_key)``: a task's recipe read by the recipe reader,
    its errors naming the chip's own key (:func:`shaper.recipe.chip_keys.chip_key`), or
    ``where`` (the qubit or coupling the task is of) where the chip has no such key."""
    from shaper.recipe.load import load_recipe

    def checked(recipe: dict, where: str, durations_key: str = "gates.single_durations"):
        try:
            load_recipe(recipe)
        except RecipeError as exc:
            key = chip_key(recipe, exc.key, durations_key, couplings)
            if key is None:
                r.fail(where, f"the {recipe['gate'].get('target')} gate's recipe built from "
                              f"it is wrong: {exc.key}: {exc.detail}")
            r.fail(key, exc.detail)
        return recipe
    return checked


def _tasks(r, raw, specs, pairs, single, gates, template, couplings) -> list[Task]:
    name = raw["name"]
    tasks = []
    checked = _checker(r, couplings)
    base = {k: copy.deepcopy(v) for k, v in template.items()}
    for q in specs.values():  # flux keys, checked even without a pair
        if q.get("flux"):
            checked(_flux_probe(q), qubit_key(q["name"]))
    durations = gates["single_durations"]
    for qname, q in specs.items():
        for parent, derived in plan(single, 1):
            transmon = _transmon(q)
            system = {"model": "transmon", "levels": transmon["levels"],
                      "qubit_frequency": q["frequency"], "anharmonicity": q["anharmonicity"],
                      "qubit": qname, **{k: q[k] for k in ("t1", "t2", "spectrum",
                                                             "offset_charge") if k in q}}
            recipe_channels = [qname]
            recipe = {"name": f"{name}-{qname}-{slug(parent)}", "system": system,
                      "gate": {"target": parent},
                      "pulse": {**base.get("pulse", {}), "duration": "20 ns",
                                "max_rabi": q["max_rabi"]},
                      **_rest(base, recipe_channels)}
            recipe["pulse"].setdefault("sample_rate", "2.4 GS/s")
            checked(recipe, qubit_key(qname))
            system = near_system(qname, specs, couplings, gates["neighbour_levels"], _transmon)
            near = None if system is None else checked(near_recipe(recipe, system, qname),
                                                       qubit_key(qname))
            if near is not None and gates["neighbours"] == "optimise":
                # alone, its frame updates as free as beside the neighbours (it is made so)
                alone = {**recipe, "gate": {**recipe["gate"], "virtual_z": True}}
                recipe, near = near, None
            else:
                alone = None
            tasks.append(Task(f"{qname}-{slug(parent)}", qname, parent, tuple(derived),
                              recipe, durations, "gates.single_durations", alone=alone,
                              near=near))
    pair_gate, pair_durations = gates["pair"], gates["pair_durations"]
    for i, (a, b) in enumerate(pairs):
        qa, qb = specs[a], specs[b]
        fixed = not (qa.get("flux") or qb.get("flux"))
        if gates["fixed_pair" if fixed else "pair"] == NO_GATE:
            continue
        if fixed:
            tasks.append(_cross_resonance(r, name, i, qa, qb, couplings[i], gates, base,
                                          checked))
            continue
        tasks.append(_flux_pair(name, i, qa, qb, couplings[i], pair_gate, pair_durations,
                                base, checked))
    return tasks


def _flux_pair(name, i, qa, qb, coupling, pair_gate, pair_durations, base, checked) -> Task:
    """A pair with a tunable qubit: the gate made by the flux, the drives off."""
    a, b = qa["name"], qb["name"]
    recipe_channels = [a, b] + [f"{q['name']}_flux" for q in (qa, qb) if q.get("flux")]
    transmons = []
    for q in (qa, qb):
        t = _transmon(q)
        if q.get("flux"):
            t["flux"] = True
        transmons.append(t)
    pulse = {**base.get("pulse", {}), "duration": "40 ns",
             "max_rabi": {a: 0, b: 0}}  # the flux makes the gate; the drives stay off
    pulse.setdefault("sample_rate", "2.4 GS/s")
    for key in ("max_flux", "flux_range"):
        values = {q["name"] + "_flux": q[key] for q in (qa, qb) if q.get("flux") and key in q}
        if values:
            pulse[key] = values
    recipe = {"name": f"{name}-{a}-{b}-{slug(pair_gate)}",
              "system": {"model": "transmons", "transmon": transmons,
                         "coupling": [{"between": [a, b],
                                       "strength": coupling["strength"]}]},
              "gate": {"target": pair_gate, "virtual_z": True}, "pulse": pulse,
              **_rest(base, recipe_channels)}
    return Task(f"{a}-{b}-{slug(pair_gate)}", f"{a}-{b}", pair_gate, (),
                checked(recipe, f"coupling[{i}]", "gates.pair_durations"), pair_durations,
                "gates.pair_durations")


def _rest(base: dict, channels: list[str]) -> dict:
    """The template's tables besides [pulse] for one task: a [template.line.<channel>]
    applies to the tasks whose system has that channel (a qubit's drive ``q``, its flux
    line ``q_flux``, a cross-resonance tone ``q_cr``)."""
    out = {k: copy.deepcopy(v) for k, v in base.items() if k not in ("pulse", "line")}
    line = {k: copy.deepcopy(v) for k, v in base.get("line", {}).items()
            if k == "oversample" or k in channels}
    if any(k != "oversample" for k in line):
        out["line"] = line
    return out
