"""The section readers of a recipe: [system], [gate], [pulse], [cost], [optimizer], [export]."""

from __future__ import annotations

import math

import numpy as np

from shaper.errors import InputError
from shaper.physics.systems import (
    NAME,
    NAME_RULE,
    SPECTRA,
    System,
    TransmonSpec,
    coupled_transmons,
    from_matrices,
)
from shaper.physics.targets import Target, gate, state_transfer
from shaper.recipe.lines import read_line
from shaper.recipe.schema import (
    DEFAULT_WEIGHTS,
    ENSEMBLE_RULES,
    GUESSES,
    KEYS,
    LAB_FRAME,
    METHODS,
    MODELS,
    PADDING,
    ExportSettings,
    MixerSettings,
    OptimizerSettings,
    Recipe,
    VerdictSettings,
    _Reader,
)
from shaper.recipe.units import format_quantity, parse_quantity


def build(r: _Reader, raw: dict, path: str | None, sha256: str) -> Recipe:
    r.check_keys(raw, "")
    if not isinstance(raw.get("description", ""), str):
        r.fail("description", f"expected text, got {str(raw['description'])[:40]!r}")
    name = raw["name"]
    if not isinstance(name, str) or not NAME.fullmatch(name):
        r.fail("name", f"expected {NAME_RULE} (it names the output folder and files), "
                       f"got {str(name)[:80]!r}")
    system = _system(r, r.table(raw, "system", "system"))
    gate_table = r.table(raw, "gate", "gate")
    gate_set = _gate_set(r, gate_table, system)
    target, virtual_z = _gate(r, gate_table, system)
    pulse = _pulse(r, r.table(raw, "pulse", "pulse"), system)
    weights, detunings, scales = _cost(r, r.table(raw, "cost", "cost"), system)
    optimizer = _optimizer(r, r.table(raw, "optimizer", "optimizer"))
    export = _export(r, r.table(raw, "export", "export"), system, pulse["limits_hz"],
                     pulse["sample_rate_hz"])
    line = read_line(r, r.table(raw, "line", "line"), [c.name for c in system.channels],
                     pulse["sample_rate_hz"])
    if export.predistort and not line.active:
        r.fail("export.predistort", "needs a [line] to invert; add the line's stages")
    if optimizer.lab_frame and system.lab is None:
        r.fail("optimizer.lab_frame", "the lab frame needs a transmon model (the drive "
                                      "operator and frame of given matrices are unknown)")
    if optimizer.lab_frame and optimizer.open_system:
        r.fail("optimizer.lab_frame", "cannot be combined with optimizer.open_system yet: "
                                      "choose one")
    verdict = _verdict(r, r.table(raw, "verdict", "verdict"), system)
    _fits_in_memory(r, system, pulse, len(scales), export,
                    line.oversample if line.active and not export.predistort else 1,
                    lab_phases=len(verdict.phases_rad()) if optimizer.lab_frame else 0)
    if optimizer.open_system and not system.collapse:
        r.fail("optimizer.open_system", "needs coherence times (system t1/t2, or collapse "
                                        "operators with rates) to optimise the channel")
    if optimizer.open_system and not target.is_gate:
        r.fail("optimizer.open_system", "optimises a gate's channel; this target is a state")
    return Recipe(name=name, path=path, sha256=sha256, system=system, target=target,
                  virtual_z=virtual_z, gate_set=gate_set, weights=weights, verdict=verdict,
                  ensemble_detunings_hz=detunings,
                  ensemble_scales=scales, optimizer=optimizer, export=export, line=line,
                  raw=raw, **pulse)


# Bytes per (slice x d^2) that one value-and-gradient holds at once: eigenvectors,
# exponentials, the derivative's G matrix, tangents and the pairwise products, complex128
# (16 bytes each), measured within a factor of two on the bundled recipes.
BYTES_PER_ENTRY = 16 * 16
MAX_EXPORT_SAMPLES = 10_000_000


def available_memory() -> int:
    """Bytes this process may still allocate (MemAvailable, else the physical memory)."""
    try:
        with open("/proc/meminfo") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    import os
    return os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")


def _fits_in_memory(r: _Reader, system: System, pulse: dict, members: int,
                    export: ExportSettings, oversample: int = 1, lab_phases: int = 0) -> None:
    """Refuse, before anything is allocated, a problem that cannot fit in this machine.

    ``lab_phases``: optimised in the lab frame over that many carrier phases (its slices
    resolve the carrier: :mod:`shaper.signal.labdrive`)."""
    from shaper.physics.grid import substeps

    n, g = pulse["samples"], export.granularity
    exported = -(-n // g) * g
    if exported > MAX_EXPORT_SAMPLES:
        r.fail("export.granularity", f"padding {n} samples to a multiple of {g} gives "
                                     f"{exported} samples, more than any AWG memory "
                                     f"({MAX_EXPORT_SAMPLES}); check the granularity")
    steps = max(oversample, substeps(export.if_frequency_hz, 1 / pulse["sample_rate_hz"])
                if export.if_frequency_hz else 1)
    d = system.dimension
    slices = n * steps
    if lab_phases:
        from shaper.physics.labframe import POINTS_PER_CYCLE, lab_terms
        fastest = lab_terms(system).fastest_hz(abs(export.if_frequency_hz))
        slices = lab_phases * 2 * max(n * steps, math.ceil(
            exported / pulse["sample_rate_hz"] * fastest * POINTS_PER_CYCLE))
    need = (members + 1) * slices * d * d * BYTES_PER_ENTRY
    have = available_memory()
    if need > 0.8 * have:
        key = "system.levels" if d > 64 else "pulse.duration"
        r.fail(key, f"this problem needs about {need / 2**30:.1f} GiB ({slices} propagator "
                    f"slices x {members + 1} system(s) x {d}^2 levels) and this machine has "
                    f"{have / 2**30:.1f} GiB available; use fewer levels, a shorter pulse or a "
                    f"smaller ensemble")


# which [system] keys each model reads; any other key would be silently ignored
MODEL_KEYS = {
    "transmon": ("model", "levels", "qubit_frequency", "anharmonicity", "drive_frequency",
                 "qubit", "t1", "t2", "spectrum", "offset_charge"),
    "transmons": ("model", "transmon", "coupling", "frame_frequency", "drive"),
    "matrices": ("model", "unit", "drift", "drift_imag", "controls", "controls_imag", "dims",
                 "computational", "collapse", "collapse_rate"),
}


def _spectrum(r: _Reader, t: dict, where: str) -> dict:
    """``spectrum`` and ``offset_charge`` as TransmonSpec keywords (README, "The charge
    model")."""
    out = {"spectrum": r.choice(t, "spectrum", f"{where}.spectrum", tuple(SPECTRA),
                                "duffing")}
    if "offset_charge" in t:
        if out["spectrum"] != "charge":
            r.fail(f"{where}.offset_charge", "only the charge model has an offset charge; "
                                             "add spectrum = \"charge\"")
        out["offset_charge"] = r.number(t, "offset_charge", f"{where}.offset_charge")
        if not -1 <= out["offset_charge"] <= 1:
            r.fail(f"{where}.offset_charge", f"expected Cooper pairs in [-1, 1] (the levels "
                                             f"repeat with period 1), got {t['offset_charge']!r}")
    return out


def _coherence(r: _Reader, t: dict, where: str) -> dict:
    """``t1`` and ``t2`` (times, optional) as TransmonSpec keywords."""
    out = {}
    for key in ("t1", "t2"):
        if key in t:
            out[f"{key}_s"] = r.number(t, key, f"{where}.{key}", kind="time", positive=True,
                                       hint="us")
    if "t1_s" in out and "t2_s" in out and out["t2_s"] > 2 * out["t1_s"] * (1 + 1e-12):
        r.fail(f"{where}.t2", f"t2 = {t['t2']!r} is longer than 2 t1 = 2 x {t['t1']!r}, which "
                              f"no qubit reaches (T2 <= 2 T1)")
    return out


def _system(r: _Reader, t: dict) -> System:
    r.check_keys(t, "system")
    model = r.choice(t, "model", "system.model", MODELS)
    for key in t:
        if key not in MODEL_KEYS[model]:
            r.fail(f"system.{key}", f"not a key of model = {model!r} (its keys: "
                                    f"{', '.join(MODEL_KEYS[model])})")
    try:
        if model == "transmon":
            for key in ("levels", "qubit_frequency", "anharmonicity"):
                if key not in t:
                    r.fail(f"system.{key}", "missing required key (model = \"transmon\")")
            levels = r.number(t, "levels", "system.levels", integer=True)
            if levels < 2:
                r.fail("system.levels", f"must be at least 2 (levels 0 and 1 are the qubit), "
                                        f"got {levels}")
            fq = r.number(t, "qubit_frequency", "system.qubit_frequency", kind="frequency",
                          positive=True)
            alpha = r.number(t, "anharmonicity", "system.anharmonicity", kind="frequency")
            fd = r.number(t, "drive_frequency", "system.drive_frequency", fq, kind="frequency",
                          positive=True)
            name = t.get("qubit", "q0")
            if not isinstance(name, str) or not NAME.fullmatch(name):
                r.fail("system.qubit", f"expected a name like \"q0\" ({NAME_RULE}), "
                                       f"got {str(name)[:80]!r}")
            spec = TransmonSpec(name=name, levels=levels, qubit_frequency_hz=fq,
                                anharmonicity_hz=alpha, **_coherence(r, t, "system"),
                                **_spectrum(r, t, "system"))
            return coupled_transmons([spec], [], frame_frequency_hz=fd)
        if model == "transmons":
            return _transmons(r, t)
        return _matrices(r, t)
    except InputError as exc:
        r.fail("system", str(exc))


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
        if levels < 2:
            r.fail(f"{where}.levels", f"must be at least 2, got {levels}")
        specs.append(TransmonSpec(
            name=name, levels=levels,
            qubit_frequency_hz=r.number(item, "qubit_frequency", f"{where}.qubit_frequency",
                                        kind="frequency", positive=True),
            anharmonicity_hz=r.number(item, "anharmonicity", f"{where}.anharmonicity",
                                      kind="frequency"),
            flux=r.flag(item, "flux", f"{where}.flux", False), **_coherence(r, item, where),
            **_spectrum(r, item, where)))
    couplings = []
    for where, item in r.tables(t, "coupling", "system.coupling", "system.coupling"):
        pair = item.get("between")
        if not (isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str)
                                                                 for p in pair)):
            r.fail(f"{where}.between", f"expected two transmon names, got {pair!r}")
        couplings.append((pair[0], pair[1], r.number(item, "strength", f"{where}.strength",
                                                     kind="frequency")))
    frame = r.number(t, "frame_frequency", "system.frame_frequency",
                     specs[0].qubit_frequency_hz, kind="frequency", positive=True)
    drives = []
    for where, item in r.tables(t, "drive", "system.drive", "system.drive"):
        for key in ("name", "transmon"):
            if not isinstance(item.get(key), str):
                r.fail(f"{where}.{key}", f"expected a name, got {item.get(key)!r}")
        drives.append((item["name"], item["transmon"],
                       r.number(item, "frequency", f"{where}.frequency", kind="frequency",
                                positive=True)))
    try:
        return coupled_transmons(specs, couplings, frame_frequency_hz=frame, drives=drives)
    except InputError as exc:
        r.fail("system.drive" if "drive" in str(exc) else "system", str(exc))


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
    try:
        return from_matrices(drift, ops, dims=dims, computational=comp, collapse=collapse)
    except InputError as exc:
        r.fail("system", str(exc))


def _gate_set(r: _Reader, t: dict, system: System) -> tuple[str, ...]:
    """``[gate] targets``: the gates of a set, each checked as a target of this system."""
    if "targets" not in t:
        return ()
    if "target" in t:
        r.fail("gate.targets", "give either target (one gate) or targets (a set), not both")
    names = t["targets"]
    if not isinstance(names, list) or not names or not all(isinstance(n, str) for n in names):
        r.fail("gate.targets", f"expected a list of gate names, e.g. [\"X\", \"X/2\", "
                               f"\"Y\"], got {str(names)[:60]!r}")
    if len(set(names)) != len(names):
        r.fail("gate.targets", f"names a gate twice: {names}")
    qubits = int(np.log2(len(system.computational)))
    for i, name in enumerate(names):
        try:
            gate(name, qubits=qubits)
        except InputError as exc:
            r.fail(f"gate.targets[{i}]", str(exc))
    return tuple(names)


def _gate(r: _Reader, t: dict, system: System) -> tuple[Target, bool]:
    r.check_keys(t, "gate")
    spec = t.get("target")
    if spec is None and isinstance(t.get("targets"), list) and t["targets"]:
        spec = t["targets"][0]  # a gate set: the recipe's own target is its first gate
    if spec is None:
        r.fail("gate.target", "missing required key (or targets, for a set of gates)")
    virtual_z = r.flag(t, "virtual_z", "gate.virtual_z", False)
    qubits = int(np.log2(len(system.computational)))
    try:
        if spec == "state":
            for key in ("initial_state", "final_state"):
                if not isinstance(t.get(key), list):
                    r.fail(f"gate.{key}", "expected a list of amplitudes on the "
                                          "computational states (target = \"state\")")
            if len(t["initial_state"]) != len(system.computational):
                r.fail("gate.initial_state", f"expected {len(system.computational)} "
                                             f"amplitudes, got {len(t['initial_state'])}")
            if virtual_z:
                r.fail("gate.virtual_z", "frame updates apply to gates, not to a state target")
            return state_transfer(t["initial_state"], t["final_state"]), False
        if spec == "matrix":
            if "matrix" not in t:
                r.fail("gate.matrix", "missing required key (target = \"matrix\")")
            m = r.matrix(t, "matrix", "gate.matrix", size=len(system.computational),
                         imag_key="matrix_imag")
            return gate(m), virtual_z
        if 2 ** qubits != len(system.computational) and virtual_z:
            r.fail("gate.virtual_z", "frame updates need 2^n computational states")
        return gate(spec, qubits=qubits if 2 ** qubits == len(system.computational) else None), \
            virtual_z
    except InputError as exc:
        r.fail("gate.target" if spec not in ("matrix", "state") else f"gate.{spec}", str(exc))


def _pulse(r: _Reader, t: dict, system: System) -> dict:
    r.check_keys(t, "pulse")
    duration = r.number(t, "duration", "pulse.duration", kind="time", positive=True)
    rate = r.number(t, "sample_rate", "pulse.sample_rate", kind="sample rate", positive=True)
    hold = r.number(t, "hold", "pulse.hold", 1, integer=True, minimum=1)
    exact = duration * rate
    n = round(exact)
    period = hold / rate
    if abs(exact - n) > 1e-6 * max(1.0, exact) or n % hold or n == 0:
        below = max(1, int(exact // hold)) * hold
        options = sorted({below, below + hold})
        shown = " or ".join(format_quantity(k / rate, "s") + f" ({k} samples)" for k in options)
        r.fail("pulse.duration", f"{t['duration']!r} is not a whole number of "
                                 f"{format_quantity(period, 's')} slices at this sample rate; "
                                 f"nearest valid durations: {shown}")
    iq = [c.name for c in system.channels if c.kind == "iq"]
    bb = [c.name for c in system.channels if c.kind == "baseband"]
    # a limit of 0 switches a channel off: not driven, no parameters, zero samples
    limits = r.per_channel(t["max_rabi"], "pulse.max_rabi", iq, allow_zero=True) if iq else {}
    ranges = _flux_ranges(r, t.get("flux_range"), bb) if "flux_range" in t else {}
    if bb:
        if "max_flux" not in t and len(ranges) < len(bb):
            r.fail("pulse.max_flux", f"missing required key: the baseband channel(s) "
                                     f"{', '.join(c for c in bb if c not in ranges)} need a "
                                     f"limit (or a pulse.flux_range)")
        if "max_flux" in t:
            limits.update(r.per_channel(t["max_flux"], "pulse.max_flux", bb, allow_zero=True))
    for c in bb:
        if c in ranges:
            limits[c] = max(-ranges[c][0], ranges[c][1])
        else:
            ranges[c] = (-limits[c], limits[c])
    if not any(v > 0 for v in limits.values()):
        r.fail("pulse.max_rabi", "every channel is switched off (limit 0): nothing drives the "
                                 "system")
    ramp_s = r.number(t, "ramp", "pulse.ramp", 0.0, kind="time", minimum=0.0)
    ramp = round(ramp_s * rate)
    if 2 * ramp > n:
        r.fail("pulse.ramp", f"two ramps of {ramp} samples do not fit in {n} samples")
    return dict(duration_s=n / rate, sample_rate_hz=rate, samples=n, hold=hold,
                limits_hz=limits, flux_ranges_hz=ranges,
                bandwidth_hz=_bandwidths(r, t.get("bandwidth"), limits, rate),
                max_out_of_band=r.number(t, "max_out_of_band", "pulse.max_out_of_band", 1e-3,
                                         minimum=0.0),
                zero_ends=r.flag(t, "zero_ends", "pulse.zero_ends", True), ramp_samples=ramp)


def _flux_ranges(r: _Reader, value, bb: list[str]) -> dict[str, tuple[float, float]]:
    """``pulse.flux_range``: ``[lowest, highest]`` for every flux line, or a table per line.

    The idle point (0) must lie within the range: the pulse starts and ends there.
    """
    where = "pulse.flux_range"
    if not bb:
        r.fail(where, "this system has no flux (baseband) channel")
    if isinstance(value, dict):
        for k in value:
            if k not in bb:
                r.fail(f"{where}.{k}", f"no flux channel of that name; flux channels: "
                                       f"{', '.join(bb)}")
        items = [(f"{where}.{k}", k, v) for k, v in value.items()]
    else:
        items = [(where, c, value) for c in bb]
    out = {}
    for key, c, pair in items:
        if not isinstance(pair, list) or len(pair) != 2:
            r.fail(key, f"expected [lowest, highest], e.g. [\"-900 MHz\", 0], got {pair!r}")
        lo, hi = (parse_quantity(v, "frequency", key=f"{key}[{i}]", path=r.path)
                  for i, v in enumerate(pair))
        if not lo <= 0 <= hi or not hi > lo:
            r.fail(key, f"expected lowest <= 0 <= highest with lowest < highest (the flux "
                        f"rests at 0 before and after the pulse), got [{lo:g}, {hi:g}] Hz")
        out[c] = (lo, hi)
    return out


def _bandwidths(r: _Reader, value, limits: dict[str, float],
                rate: float) -> dict[str, float] | None:
    """``pulse.bandwidth``: one cutoff for every driven channel, or a table per channel."""
    if value is None:
        return None
    where = "pulse.bandwidth"
    if isinstance(value, dict):
        for k in value:
            if k not in limits:
                r.fail(f"{where}.{k}", f"no channel of that name; channels: "
                                       f"{', '.join(limits)}")
        items = {k: (f"{where}.{k}", v) for k, v in value.items()}
    else:
        items = {c: (where, value) for c, lim in limits.items() if lim > 0}
    out = {}
    for c, (key, v) in items.items():
        cutoff = parse_quantity(v, "frequency", key=key, path=r.path)
        if not cutoff >= 0:
            r.fail(key, f"must be a positive frequency (or 0: no limit), got {v!r}")
        if cutoff >= rate / 2:
            r.fail(key, f"the cutoff must lie below the Nyquist frequency "
                        f"{format_quantity(rate / 2, 'Hz')}")
        if cutoff > 0 and limits[c] > 0:
            out[c] = cutoff
    return out or None


def _cost(r: _Reader, t: dict, system: System):
    r.check_keys(t, "cost")
    weights = {k: r.number(t, k, f"cost.{k}", v, minimum=0.0) for k, v in DEFAULT_WEIGHTS.items()
               if k != "infidelity"}
    weights = {"infidelity": 1.0, **weights}
    det = t.get("ensemble_detunings", [])
    scales = t.get("ensemble_scales", [])
    for key, val in (("ensemble_detunings", det), ("ensemble_scales", scales)):
        if not isinstance(val, list):
            r.fail(f"cost.{key}", f"expected a list, got {val!r}")
    det_hz = [parse_quantity(v, "frequency", key=f"cost.ensemble_detunings[{i}]", path=r.path)
              for i, v in enumerate(det)] or [0.0]
    for i, s in enumerate(scales):
        if isinstance(s, bool) or not isinstance(s, int | float) or not 0 < s < 10:
            r.fail(f"cost.ensemble_scales[{i}]", f"expected a factor between 0 and 10 "
                                                 f"(1.0 is the nominal amplitude), got {s!r}")
    scales = scales or [1.0]
    # the ensemble is every combination; each detuning offset applies to every qubit
    grid_d, grid_s = np.meshgrid(np.array(det_hz), np.array(scales, float), indexing="ij")
    detunings = np.repeat(grid_d.reshape(-1, 1), len(system.dims), axis=1)
    return weights, detunings, grid_s.reshape(-1)


def _optimizer(r: _Reader, t: dict) -> OptimizerSettings:
    r.check_keys(t, "optimizer")
    d = OptimizerSettings()
    initial = t.get("initial", d.initial)
    if not isinstance(initial, str) or (initial not in GUESSES and not initial.endswith(
            (".csv", ".npy", ".npz"))):
        r.fail("optimizer.initial", f"choose one of: {', '.join(GUESSES)}, or the path of a "
                                    f"waveform file (.csv) from an earlier run")
    return OptimizerSettings(
        method=r.choice(t, "method", "optimizer.method", METHODS, d.method),
        max_iterations=r.number(t, "max_iterations", "optimizer.max_iterations",
                                d.max_iterations, integer=True, minimum=1),
        target_infidelity=r.number(t, "target_infidelity", "optimizer.target_infidelity",
                                   d.target_infidelity, positive=True),
        target_leakage=r.number(t, "target_leakage", "optimizer.target_leakage",
                                d.target_leakage, positive=True),
        margin=r.number(t, "margin", "optimizer.margin", d.margin, minimum=1.0),
        max_time_s=r.number(t, "max_time", "optimizer.max_time", d.max_time_s, kind="time",
                            positive=True, bare_check=False),
        stall_iterations=r.number(t, "stall_iterations", "optimizer.stall_iterations",
                                  d.stall_iterations, integer=True, minimum=1),
        seed=r.number(t, "seed", "optimizer.seed", d.seed, integer=True, minimum=0),
        starts=r.number(t, "starts", "optimizer.starts", d.starts, integer=True, minimum=1),
        initial=initial,
        drag_scale=r.number(t, "drag_scale", "optimizer.drag_scale", d.drag_scale),
        learning_rate=r.number(t, "learning_rate", "optimizer.learning_rate", d.learning_rate,
                               positive=True),
        propagator=r.choice(t, "propagator", "optimizer.propagator", ("eigh", "pade"),
                            d.propagator),
        ensemble_targets=r.choice(t, "ensemble_targets", "optimizer.ensemble_targets",
                                  ENSEMBLE_RULES, d.ensemble_targets),
        open_system=r.flag(t, "open_system", "optimizer.open_system", d.open_system),
        lab_frame=r.flag(t, "lab_frame", "optimizer.lab_frame", d.lab_frame))


def _verdict(r: _Reader, t: dict, system: System) -> VerdictSettings:
    r.check_keys(t, "verdict")
    d = VerdictSettings()
    lab = r.choice(t, "lab_frame", "verdict.lab_frame", LAB_FRAME, d.lab_frame)
    if lab == "on" and system.lab is None:
        r.fail("verdict.lab_frame", "the lab frame needs a transmon model (the drive "
                                    "operator and the frame of given matrices are unknown); "
                                    "use \"auto\" or \"off\"")
    phase = None
    if "carrier_phase_deg" in t:
        phase = r.number(t, "carrier_phase_deg", "verdict.carrier_phase_deg")
        if not -360 <= phase <= 360:
            r.fail("verdict.carrier_phase_deg", f"expected degrees in [-360, 360], got {phase!r}")
    phases = r.number(t, "carrier_phases", "verdict.carrier_phases", d.carrier_phases,
                      integer=True, minimum=1)
    if phases > 64:
        r.fail("verdict.carrier_phases", f"at most 64 phases (each is a lab-frame run), got "
                                         f"{phases}")
    extra = r.number(t, "extra_levels", "verdict.extra_levels", d.extra_levels, integer=True,
                     minimum=0)
    if extra > 8:
        r.fail("verdict.extra_levels", f"at most 8 levels more per transmon, got {extra}")
    return VerdictSettings(lab_frame=lab, carrier_phase_deg=phase, carrier_phases=phases,
                           extra_levels=extra)


def _export(r: _Reader, t: dict, system: System, limits: dict[str, float],
            rate: float) -> ExportSettings:
    r.check_keys(t, "export")
    channels = [c.name for c in system.channels]
    # a channel that is not driven still has a column: give it any positive full scale
    fallback = max(limits.values())
    full = r.per_channel(t["full_scale"], "export.full_scale", channels) \
        if "full_scale" in t else {c: limits[c] or fallback for c in channels}
    for c in channels:
        if limits[c] > full[c] * (1 + 1e-12):
            key = "pulse.max_flux" if c.endswith("_flux") else "pulse.max_rabi"
            r.fail(key, f"the limit {format_quantity(limits[c], 'Hz')} of channel {c} is above "
                        f"its full scale {format_quantity(full[c], 'Hz')} (export.full_scale); "
                        f"lower the limit or raise the full scale")
    bits = r.number(t, "dac_bits", "export.dac_bits", 16, integer=True, minimum=2)
    if_hz = r.number(t, "if_frequency", "export.if_frequency", 0.0, kind="frequency")
    if abs(if_hz) >= rate / 2:
        r.fail("export.if_frequency", f"must lie below the Nyquist frequency "
                                      f"{format_quantity(rate / 2, 'Hz')} of the sample rate")
    if bits > 32:
        r.fail("export.dac_bits", f"must be at most 32, got {bits}")
    return ExportSettings(
        full_scale_hz=full, dac_bits=bits,
        granularity=r.number(t, "granularity", "export.granularity", 1, integer=True,
                             minimum=1),
        padding=r.choice(t, "padding", "export.padding", PADDING, "after"),
        clip=r.flag(t, "clip", "export.clip", False),
        if_frequency_hz=if_hz,
        sideband=r.choice(t, "sideband", "export.sideband", ("lower", "upper"), "lower"),
        predistort=r.flag(t, "predistort", "export.predistort", False),
        mixer=_mixers(r, r.table(t, "mixer", "export.mixer"), system),
        codes=r.flag(t, "codes", "export.codes", False))


def _mixers(r: _Reader, t: dict, system) -> dict[str, MixerSettings]:
    """``[export.mixer.<channel>]``: the imperfections the export corrects, per I/Q channel."""
    iq = [c.name for c in system.channels if c.kind == "iq"]
    out = {}
    for name, table in t.items():
        where = f"export.mixer.{name}"
        if name not in iq:
            r.fail(where, f"no I/Q channel of that name; I/Q channels: {', '.join(iq)}")
        if not isinstance(table, dict):
            r.fail(where, f"expected a table of {', '.join(KEYS['export.mixer'])}")
        r.check_keys(table, "export.mixer", where)
        d = MixerSettings()
        values = {k: r.number(table, k, f"{where}.{k}", getattr(d, k))
                  for k in KEYS["export.mixer"]}
        if not 0.5 <= values["gain"] <= 2.0:
            r.fail(f"{where}.gain", f"expected the Q/I gain ratio between 0.5 and 2, got "
                                    f"{values['gain']}")
        if abs(values["phase_deg"]) > 30:
            r.fail(f"{where}.phase_deg", f"expected a phase error within +-30 degrees, got "
                                         f"{values['phase_deg']}")
        for k in ("offset_i", "offset_q"):
            if abs(values[k]) > 0.5:
                r.fail(f"{where}.{k}", f"expected a DC offset within +-0.5 of full scale, got "
                                       f"{values[k]}")
        out[name] = MixerSettings(**values)
    return out
