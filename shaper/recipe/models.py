"""The ``[system]`` models: a registry from ``model = "..."`` to the keys it reads and its
reader (README, "Recipe reference"; DEVELOPERS.md, "Where new things go").

A new system model is one reader plus one :func:`register` call: its keys are then known
to the key checker (unknown keys are refused with a suggestion) and ``model = "<name>"``
reads the table through it. Every reader returns a :class:`~shaper.physics.systems.System`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import NamedTuple

import numpy as np

from shaper.errors import InputError
from shaper.physics.dressed import dressed
from shaper.physics.systems import NAME, NAME_RULE, System, from_matrices
from shaper.physics.transmons import MAX_CHARGE_LEVELS, SPECTRA, TransmonSpec, coupled_transmons
from shaper.recipe.schema import KEYS, _Reader
from shaper.recipe.units import format_quantity, parse_quantity

MAX_TRANSMON_LEVELS = 64  # a transmon has a handful of bound levels; more is a typo
MAX_COUPLING_HZ = 1e9  # above this a coupling is a unit slip
MAX_CARRIER_OFFSET_HZ = 20e9  # a drive this far from the frame is one too
MIN_COHERENCE_S = 1e-9  # a T1 or T2 below this is a unit slip
MAX_QUBIT_HZ = 100e9  # a transmon's (or a frame's) frequency above this is a unit slip
# the basis a transmons system's computational states are named in (README, "Coupled
# transmons: the dressed basis"): the bare product states, or what they become at rest
BASES = ("bare", "dressed")


class Model(NamedTuple):
    """A ``[system]`` model: the keys it reads (besides ``model``), its reader, the keys
    of its nested tables (``{"transmon": (...)}`` for ``[[system.transmon]]``), and where
    its levels are set.

    ``level_tables(system_table) -> [table, ...]``: the raw tables (``[system]`` itself or
    tables inside it, the very objects, so that an edit lands in the recipe) that carry
    this model's ``levels`` and its optional ``t1``/``t2``, one per subsystem in recipe
    order; ``--levels``, ``--t1``/``--t2`` and the verdict's extra levels edit them
    (:mod:`shaper.recipe.derive`). None: the model's matrices fix the levels and the
    noise.
    """

    keys: tuple[str, ...]
    read: Callable[[_Reader, dict], System]
    tables: dict[str, tuple[str, ...]] = {}
    level_tables: Callable[[dict], list[dict]] | None = None


def register(name: str, model: Model) -> None:
    """Make ``model = "<name>"`` readable; its keys join the ``[system]`` key list."""
    MODELS[name] = model
    KEYS["system"] = tuple(dict.fromkeys(KEYS["system"] + model.keys))
    for table, keys in model.tables.items():
        KEYS[f"system.{table}"] = keys


def level_tables(system_table: dict) -> list[dict] | None:
    """The raw tables of a ``[system]`` table that carry its levels (and ``t1``/``t2``),
    as its model says (:attr:`Model.level_tables`); None where the model's matrices fix
    them or the model is not registered in this process."""
    model = MODELS.get(system_table.get("model"))
    if model is None or model.level_tables is None:
        return None
    return list(model.level_tables(system_table))


def levels_key(system_table: dict) -> str:
    """Where a recipe sets its levels, in words for a hint: ``system.levels`` where the
    ``[system]`` table itself carries them, ``levels on every [[system.<name>]]`` where
    its nested tables do (found by identity among the tables :func:`level_tables` gives)."""
    tables = level_tables(system_table) or [system_table]
    nested = [key for key, value in system_table.items() if isinstance(value, list)
              and any(any(v is t for t in tables) for v in value)]
    return f"levels on every [[system.{nested[0]}]]" if nested else "system.levels"


def read_system(r: _Reader, t: dict) -> System:
    """``[system]`` through the model it names; keys of another model are refused."""
    r.check_keys(t, "system")
    name = r.choice(t, "model", "system.model", tuple(MODELS))
    model = MODELS[name]
    for key in t:
        if key != "model" and key not in model.keys:
            r.fail(f"system.{key}", f"not a key of model = {name!r} (its keys: model, "
                                    f"{', '.join(model.keys)})")
    try:
        return model.read(r, t)
    except InputError as exc:
        r.fail("system", str(exc))


def _frequency(r: _Reader, t: dict, key: str, where: str, default=None) -> float:
    """A transmon's (or a frame's) frequency: positive and at most :data:`MAX_QUBIT_HZ`,
    refused here (not after the optimiser ran, when the lab frame would resolve it)."""
    value = r.number(t, key, f"{where}.{key}", default, kind="frequency", positive=True)
    if value > MAX_QUBIT_HZ:
        r.fail(f"{where}.{key}", f"{t[key]!r} is above {format_quantity(MAX_QUBIT_HZ, 'Hz')}, "
                                 f"beyond any transmon; check the unit (e.g. \"5.1 GHz\")")
    return value


def _anharmonicity(r: _Reader, t: dict, where: str, qubit_hz: float) -> float:
    """A transmon's anharmonicity: smaller in size than its qubit frequency (a transmon's is
    -100 to -400 MHz; f12 = f01 + alpha stays positive), else a unit slip."""
    alpha = r.number(t, "anharmonicity", f"{where}.anharmonicity", kind="frequency")
    if not abs(alpha) < qubit_hz:
        r.fail(f"{where}.anharmonicity", f"{t['anharmonicity']!r} is not smaller in size than "
                                         f"the qubit frequency {format_quantity(qubit_hz, 'Hz')}"
                                         f"; a transmon's is a few hundred MHz (check the unit)")
    return alpha


# A chip's transmons are Cooper-pair boxes: the Duffing ladder loses 1e-6 to 1e-3 on pulses
# played on the charge model at the same cost (README, "The charge model"); it stays a choice.
DEFAULT_SPECTRUM = "charge"


def _spectrum(r: _Reader, t: dict, where: str) -> dict:
    """``spectrum`` and ``offset_charge`` as TransmonSpec keywords (README, "The charge
    model")."""
    out = {"spectrum": r.choice(t, "spectrum", f"{where}.spectrum", tuple(SPECTRA),
                                DEFAULT_SPECTRUM)}
    if "offset_charge" in t:
        if out["spectrum"] != "charge":
            r.fail(f"{where}.offset_charge", "only the charge model has an offset charge; "
                                             "add spectrum = \"charge\"")
        out["offset_charge"] = r.number(t, "offset_charge", f"{where}.offset_charge")
        if not -1 <= out["offset_charge"] <= 1:
            r.fail(f"{where}.offset_charge", f"expected Cooper pairs in [-1, 1] (the levels "
                                             f"repeat with period 1), got {t['offset_charge']!r}")
    return out


def max_levels(spectrum: str) -> int:
    """The most levels a transmon of ``spectrum`` keeps: the charge model's bound states
    (:data:`~shaper.physics.transmons.MAX_CHARGE_LEVELS`), the Duffing ladder's
    :data:`MAX_TRANSMON_LEVELS`."""
    return MAX_CHARGE_LEVELS if spectrum == "charge" else MAX_TRANSMON_LEVELS


def _spectrum_levels(r: _Reader, levels: int, spectrum: str, where: str) -> None:
    """``levels`` within what ``spectrum`` keeps, refused naming ``{where}.levels`` (the
    key the user wrote; the model's own error named no key)."""
    if levels > max_levels(spectrum):
        r.fail(f"{where}.levels", f"the charge model (the default spectrum) keeps at most "
                                  f"{MAX_CHARGE_LEVELS} levels (levels far above the cosine "
                                  f"potential are not a transmon's), got {levels}; keep at "
                                  f"most {MAX_CHARGE_LEVELS}, or spectrum = \"duffing\" for "
                                  f"up to {MAX_TRANSMON_LEVELS}")


def _coherence(r: _Reader, t: dict, where: str) -> dict:
    """``t1`` and ``t2`` (times, optional) as TransmonSpec keywords."""
    out = {}
    for key in ("t1", "t2"):
        if key in t:
            out[f"{key}_s"] = r.number(t, key, f"{where}.{key}", kind="time", positive=True,
                                       hint="us")
            if out[f"{key}_s"] < MIN_COHERENCE_S:
                r.fail(f"{where}.{key}", f"{t[key]!r} is shorter than a nanosecond, shorter "
                                         f"than any sample; check the unit (e.g. \"40 us\")")
    if "t1_s" in out and "t2_s" in out and out["t2_s"] > 2 * out["t1_s"] * (1 + 1e-12):
        r.fail(f"{where}.t2", f"t2 = {t['t2']!r} is longer than 2 t1 = 2 x {t['t1']!r}, which "
                              f"no qubit reaches (T2 <= 2 T1)")
    return out


def _transmon(r: _Reader, t: dict) -> System:
    """``model = "transmon"``: one transmon in the frame of its drive."""
    for key in ("levels", "qubit_frequency", "anharmonicity"):
        if key not in t:
            r.fail(f"system.{key}", "missing required key (model = \"transmon\")")
    levels = r.number(t, "levels", "system.levels", integer=True)
    if not 2 <= levels <= MAX_TRANSMON_LEVELS:
        r.fail("system.levels", f"must be from 2 (levels 0 and 1 are the qubit) to "
                                f"{MAX_TRANSMON_LEVELS} (a transmon keeps a few bound levels), "
                                f"got {levels}")
    fq = _frequency(r, t, "qubit_frequency", "system")
    alpha = _anharmonicity(r, t, "system", fq)
    fd = _frequency(r, t, "drive_frequency", "system", fq)
    name = t.get("qubit", "q0")
    if not isinstance(name, str) or not NAME.fullmatch(name):
        r.fail("system.qubit", f"expected a name like \"q0\" ({NAME_RULE}), "
                               f"got {str(name)[:80]!r}")
    spectrum = _spectrum(r, t, "system")
    _spectrum_levels(r, levels, spectrum["spectrum"], "system")
    spec = TransmonSpec(name=name, levels=levels, qubit_frequency_hz=fq,
                        anharmonicity_hz=alpha, **_coherence(r, t, "system"), **spectrum)
    return coupled_transmons([spec], [], frame_frequency_hz=fd)


def _couplings(r: _Reader, t: dict) -> list[tuple[str, str, float]]:
    """``[[system.coupling]]``: two transmon names and a strength each."""
    couplings = []
    for where, item in r.tables(t, "coupling", "system.coupling", "system.coupling"):
        pair = item.get("between")
        if not (isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str)
                                                                 for p in pair)):
            r.fail(f"{where}.between", f"expected two transmon names, got {str(pair)[:60]!r}")
        g = r.number(item, "strength", f"{where}.strength", kind="frequency")
        if abs(g) > MAX_COUPLING_HZ:
            r.fail(f"{where}.strength", f"{format_quantity(g, 'Hz')} is above "
                                        f"{format_quantity(MAX_COUPLING_HZ, 'Hz')}; transmon "
                                        f"couplings are MHz to tens of MHz (check the unit)")
        couplings.append((pair[0], pair[1], g))
    return couplings


def _transmons(r: _Reader, t: dict) -> System:
    items = t.get("transmon")
    if not isinstance(items, list) or not items:
        r.fail("system.transmon", "expected one [[system.transmon]] table per transmon")
    specs = []
    for i, (where, item) in enumerate(r.tables(t, "transmon", "system.transmon",
                                               "system.transmon")):
        name = item.get("name", f"q{i}")
        if not isinstance(name, str) or not NAME.fullmatch(name):
            r.fail(f"{where}.name", f"expected {NAME_RULE}, got {str(name)[:80]!r}")
        levels = r.number(item, "levels", f"{where}.levels", integer=True)
        if not 2 <= levels <= MAX_TRANSMON_LEVELS:
            r.fail(f"{where}.levels", f"must be from 2 to {MAX_TRANSMON_LEVELS}, got {levels}")
        spectrum = _spectrum(r, item, where)
        _spectrum_levels(r, levels, spectrum["spectrum"], where)
        specs.append(TransmonSpec(
            name=name, levels=levels,
            qubit_frequency_hz=(fq := _frequency(r, item, "qubit_frequency", where)),
            anharmonicity_hz=_anharmonicity(r, item, where, fq),
            flux=r.flag(item, "flux", f"{where}.flux", False),
            driven=r.flag(item, "driven", f"{where}.driven", True), **_coherence(r, item, where),
            **spectrum))
    couplings = _couplings(r, t)
    frame = _frequency(r, t, "frame_frequency", "system", specs[0].qubit_frequency_hz)
    drives = _drives(r, t, frame)
    basis = r.choice(t, "basis", "system.basis", BASES, "bare")
    try:
        system = coupled_transmons(specs, couplings, frame_frequency_hz=frame, drives=drives)
    except InputError as exc:
        r.fail("system.drive" if "drive" in str(exc) else "system", str(exc))
    if not system.channels:
        r.fail("system.transmon", "no transmon is driven (driven = false on every one) and "
                                  "none has a flux line: nothing to optimise")
    if basis == "bare":
        return system
    try:
        return dressed(system)
    except InputError as exc:
        r.fail("system.basis", f"{exc} (frame {format_quantity(frame, 'Hz')})")


def check_more_levels(r: _Reader, t: dict, system: System, extra: int) -> None:
    """The verdict re-plays every transmon with ``extra`` more levels: that must stay a
    transmon the reader accepts (at most :func:`max_levels` of its spectrum), refused here
    naming what the user wrote (not after the optimiser ran, naming a sum nobody wrote)."""
    if system.lab is None or not extra:
        return
    table = r.raw.get("system", {})
    items = [("system.levels", table)] if "levels" in table else [
        (f"system.transmon[{i}].levels", tr) for i, tr in enumerate(table.get("transmon", []))]
    over = [(where, item, most) for where, item in items
            if item.get("levels", 0) + extra > (most := max_levels(item.get(
                "spectrum", DEFAULT_SPECTRUM)))]
    if not over:
        return
    where, item, most = over[0]
    keeps = (f"the charge model keeps at most {most}" if most == MAX_CHARGE_LEVELS else
             f"a transmon keeps at most {most}")
    written = "extra_levels" in t
    r.fail("verdict.extra_levels" if written else where,
           f"levels = {item.get('levels')!r} with verdict.extra_levels = "
           f"{t['extra_levels'] if written else f'{extra} (the default)'} is "
           f"{item.get('levels', 0) + extra} levels for the verdict's re-check; {keeps}: "
           f"keep at most {most - extra} levels, or fewer verdict.extra_levels")


def _drives(r: _Reader, t: dict, frame: float) -> list[tuple[str, str, float]]:
    """``[[system.drive]]``: ``(name, transmon, carrier_hz)`` per table, each carrier
    near the frame (``frame``, Hz)."""
    drives = []
    for where, item in r.tables(t, "drive", "system.drive", "system.drive"):
        for key in ("name", "transmon"):
            if not isinstance(item.get(key), str):
                r.fail(f"{where}.{key}", f"expected a name, got {item.get(key)!r}")
        carrier = r.number(item, "frequency", f"{where}.frequency", kind="frequency",
                           positive=True)
        if abs(carrier - frame) > MAX_CARRIER_OFFSET_HZ:
            r.fail(f"{where}.frequency", f"{format_quantity(carrier, 'Hz')} is more than "
                                         f"{format_quantity(MAX_CARRIER_OFFSET_HZ, 'Hz')} from "
                                         f"the frame {format_quantity(frame, 'Hz')}; a drive "
                                         f"sits near the transmons' frequencies (check the unit)")
        drives.append((item["name"], item["transmon"], carrier))
    return drives


def _matrices(r: _Reader, t: dict) -> System:
    unit = t.get("unit", "Hz")
    scale = parse_quantity(f"1 {unit}", "frequency", key="system.unit", path=r.path)
    if "drift" not in t:
        r.fail("system.drift", "missing required key (model = \"matrices\")")
    drift = r.matrix(t, "drift", "system.drift", imag_key="drift_imag") * scale
    controls = r.table(t, "controls", "system.controls")
    imag = r.table(t, "controls_imag", "system.controls_imag")
    if not controls:
        r.fail("system.controls", "expected a table of named control matrices, e.g. "
                                  "controls.drive_i = [[0, 0.5], [0.5, 0]]")
    ops = {}
    for name in imag:
        if name not in controls:
            r.fail(f"system.controls_imag.{name}", f"no real part system.controls.{name}; "
                                                   f"controls: {', '.join(controls)}")
    for name in controls:
        where = f"system.controls.{name}"
        if not NAME.fullmatch(name):
            r.fail(where, f"expected a control name of {NAME_RULE}")
        op = np.real(r.matrix(controls, name, where, size=drift.shape[0]))
        if name in imag:
            op = op + 1j * np.real(r.matrix(imag, name, f"system.controls_imag.{name}",
                                            size=drift.shape[0]))
        ops[name] = op
    dims = t.get("dims")
    comp = t.get("computational")
    for key, val in (("dims", dims), ("computational", comp)):
        if val is not None and not (isinstance(val, list) and all(
                isinstance(x, int) and not isinstance(x, bool) for x in val)):
            r.fail(f"system.{key}", f"expected a list of whole numbers, got {val!r}")
    collapse = {}
    rates = r.table(t, "collapse_rate", "system.collapse_rate")
    for name, _ in r.table(t, "collapse", "system.collapse").items():
        where = f"system.collapse.{name}"
        op = r.matrix(t["collapse"], name, where, size=drift.shape[0])
        if name not in rates:
            r.fail(f"system.collapse_rate.{name}", "missing: every collapse operator needs a "
                                                   "rate (a frequency, e.g. \"25 kHz\" = 1/40us)")
        rate = r.number(rates, name, f"system.collapse_rate.{name}", kind="frequency",
                        positive=True, bare_check=False)
        collapse[name] = np.sqrt(rate) * op
    for name in rates:
        if name not in collapse:
            r.fail(f"system.collapse_rate.{name}", f"no operator system.collapse.{name}")
    return from_matrices(drift, ops, dims=dims, computational=comp, collapse=collapse)


MODELS: dict[str, Model] = {
    "transmon": Model(("levels", "qubit_frequency", "anharmonicity", "drive_frequency",
                       "qubit", "t1", "t2", "spectrum", "offset_charge"), _transmon,
                      level_tables=lambda t: [t]),
    "transmons": Model(("transmon", "coupling", "frame_frequency", "drive", "basis"),
                       _transmons, level_tables=lambda t: list(t.get("transmon", []))),
    "matrices": Model(("unit", "drift", "drift_imag", "controls", "controls_imag", "dims",
                       "computational", "collapse", "collapse_rate"), _matrices),
}
