"""The section readers of a recipe: [pulse], [cost], [optimizer], [verdict], and ``build``,
which reads every section in order ([system]: :mod:`~shaper.recipe.models`; [gate]:
:mod:`~shaper.recipe.gate`; [export]: :mod:`~shaper.recipe.instrument`; [line] and [awg]:
:mod:`~shaper.recipe.lines`)."""

from __future__ import annotations

import numpy as np

from shaper.physics.systems import NAME, NAME_RULE, System
from shaper.recipe.gate import read_gate, read_gate_set
from shaper.recipe.instrument import read_export
from shaper.recipe.lines import read_line
from shaper.recipe.memory import fits_in_memory
from shaper.recipe.models import read_system
from shaper.recipe.schema import (
    DEFAULT_WEIGHTS,
    ENSEMBLE_RULES,
    GUESSES,
    LAB_FRAME,
    LAB_MODES,
    METHODS,
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
    system = read_system(r, r.table(raw, "system", "system"))
    gate_table = r.table(raw, "gate", "gate")
    gate_set = read_gate_set(r, gate_table, system)
    target, virtual_z = read_gate(r, gate_table, system)
    pulse = _pulse(r, r.table(raw, "pulse", "pulse"), system)
    weights, detunings, scales = _cost(r, r.table(raw, "cost", "cost"), system)
    optimizer = _optimizer(r, r.table(raw, "optimizer", "optimizer"))
    export = read_export(r, r.table(raw, "export", "export"), system, pulse["limits_hz"],
                     pulse["sample_rate_hz"])
    line = read_line(r, r.table(raw, "line", "line"), [c.name for c in system.channels],
                     pulse["sample_rate_hz"], r.table(raw, "awg", "awg"))
    _check_cutoffs(r, line, pulse["duration_s"])
    if export.predistort and not line.active:
        r.fail("export.predistort", "needs a [line] to invert; add the line's stages")
    verdict = _verdict(r, r.table(raw, "verdict", "verdict"), system)
    optimizer = _resolve_lab(r, optimizer, system, verdict)
    filtered = bool(line.awg.stages) or (line.active and not export.predistort)
    fits_in_memory(r, system, pulse, len(scales), export,
                    line.oversample if filtered else 1,
                    lab_phases=len(verdict.phases_rad()) if optimizer.lab_frame == "exact"
                    else 0)
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


MIN_CUTOFF_CYCLES = 0.1  # a line cutoff times the pulse's duration below this passes nothing


def _check_cutoffs(r: _Reader, line, duration_s: float) -> None:
    """A line stage whose cutoff (a ``cutoff_hz`` among its kind's parameters) is far below
    1 / duration lets none of the pulse through: the optimiser would stop at once with the
    gate undone ("converged" at infidelity ~0.7)."""
    where = [(f"line.{channel}[{i}].cutoff", st) for channel, stages in line.stages.items()
             for i, st in enumerate(stages)]
    for key, st in [("awg.cutoff", st) for st in line.awg.stages] + where:
        cutoff = getattr(st.params, "cutoff_hz", None)
        if cutoff and cutoff * duration_s < MIN_CUTOFF_CYCLES:
            r.fail(key, f"{format_quantity(cutoff, 'Hz')} passes almost nothing of a "
                        f"{format_quantity(duration_s, 's')} pulse (cutoff x duration < "
                        f"{MIN_CUTOFF_CYCLES}); check the unit (lines between a DAC and a "
                        f"chip pass tens to hundreds of MHz)")


MAX_RABI_HZ = 10e9  # a Rabi frequency above this is a unit slip, not a drive
MAX_FLUX_HZ = 50e9  # a frequency excursion above this is too


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
        # digits enough to be accepted when copied back into the recipe
        shown = " or ".join(format_quantity(k / rate, "s", 12) + f" ({k} samples)"
                            for k in options)
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
    for c, v in limits.items():
        key, bound = ("pulse.max_flux", MAX_FLUX_HZ) if c in bb else ("pulse.max_rabi",
                                                                      MAX_RABI_HZ)
        if v > bound and not (c in bb and c in ranges and "max_flux" not in t):
            r.fail(key, f"{format_quantity(v, 'Hz')} on channel {c} is above "
                        f"{format_quantity(bound, 'Hz')}, beyond any transmon drive; check "
                        f"the unit (e.g. \"60 MHz\")")
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
        method=r.choice(t, "method", "optimizer.method", tuple(METHODS), d.method),
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
        lab_frame=_lab_mode(r, t),
        escalate=r.flag(t, "escalate", "optimizer.escalate", d.escalate))


def _lab_mode(r: _Reader, t: dict) -> str:
    """``optimizer.lab_frame``: a mode of :data:`LAB_MODES` (true and false, the older
    spelling, are "exact" and "off"); "auto" is resolved by :func:`_resolve_lab` once the
    system and the verdict are known."""
    value = t.get("lab_frame", "auto")
    if isinstance(value, bool):
        return "exact" if value else "off"
    return r.choice(t, "lab_frame", "optimizer.lab_frame", LAB_MODES, "auto")


def _resolve_lab(r: _Reader, optimizer: OptimizerSettings, system: System,
                 verdict: VerdictSettings) -> OptimizerSettings:
    """The optimiser's model of the counter-rotating terms: "auto" is "corrected" wherever
    the verdict judges a lab frame and the correction holds (a closed system, no resonant
    counter-rotating process), else "off" (README, "The lab frame")."""
    from dataclasses import replace

    mode = optimizer.lab_frame
    judged = system.lab is not None and verdict.lab_frame != "off"
    if mode == "auto":
        mode = "corrected" if judged and not optimizer.open_system else "off"
    if mode in ("corrected", "exact") and system.lab is None:
        r.fail("optimizer.lab_frame", "the lab frame needs a transmon model (the drive "
                                      "operator and frame of given matrices are unknown)")
    if mode in ("corrected", "exact") and optimizer.open_system:
        if optimizer.lab_frame == "auto":
            mode = "off"
        else:
            r.fail("optimizer.lab_frame", "cannot be combined with optimizer.open_system "
                                          "yet: choose one")
    if mode == "corrected":
        from shaper.physics.effective import correction_for
        try:
            correction_for(system)
        except ValueError as exc:
            if optimizer.lab_frame == "auto":
                mode = "off"
            else:
                r.fail("optimizer.lab_frame", f"{exc}; use \"exact\"")
    return replace(optimizer, lab_frame=mode)


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
