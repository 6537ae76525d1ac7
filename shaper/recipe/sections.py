"""The section readers of a recipe: [pulse], [cost], [optimizer], [verdict], and ``build``,
which reads every section in order ([system]: :mod:`~shaper.recipe.models`; [gate]:
:mod:`~shaper.recipe.gate`; [export]: :mod:`~shaper.recipe.instrument`; [line] and [awg]:
:mod:`~shaper.recipe.lines`)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from shaper.physics.systems import NAME, NAME_RULE, System
from shaper.recipe.awg import read_awg
from shaper.recipe.gate import read_gate, read_gate_set
from shaper.recipe.instrument import read_export
from shaper.recipe.lines import read_line
from shaper.recipe.memory import fits_in_memory, fits_in_time
from shaper.recipe.models import read_system
from shaper.recipe.optimizer_verdict import read_optimizer, read_verdict, resolve_lab
from shaper.recipe.schema import (
    DEFAULT_WEIGHTS,
    Recipe,
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
    optimizer = read_optimizer(r, r.table(raw, "optimizer", "optimizer"))
    export = read_export(r, r.table(raw, "export", "export"), system, pulse["limits_hz"],
                     pulse["sample_rate_hz"])
    line = read_line(r, r.table(raw, "line", "line"), [c.name for c in system.channels],
                     pulse["sample_rate_hz"])
    line = replace(line, awg=read_awg(r, r.table(raw, "awg", "awg"), pulse["sample_rate_hz"],
                                      line.oversample))
    _check_cutoffs(r, line, pulse["duration_s"])
    if export.predistort and not line.active:
        r.fail("export.predistort", "needs a [line] to invert; add the line's stages")
    verdict = read_verdict(r, r.table(raw, "verdict", "verdict"), system)
    optimizer = resolve_lab(r, optimizer, system, verdict, filtered=bool(line.awg.stages))
    filtered = bool(line.awg.stages) or (line.active and not export.predistort)
    fits_in_memory(r, system, pulse, len(scales), export,
                    line.oversample if filtered else 1,
                    lab_phases=len(verdict.phases_rad()) if optimizer.lab_frame == "exact"
                    else 0, corrected=optimizer.lab_frame == "corrected")
    fits_in_time(r, system, pulse, len(scales), export,
                 line.oversample if filtered else 1, verdict)
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
MAX_ENSEMBLE = 100  # values per ensemble list (their product is every member)
MAX_DETUNING_HZ = 1e9  # an ensemble's detuning above this is a unit slip
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
                                         positive=True, below=1),
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
        if max(-lo, hi) > MAX_FLUX_HZ:
            r.fail(key, f"{pair!r} reaches beyond {format_quantity(MAX_FLUX_HZ, 'Hz')}, "
                        f"beyond any transmon's flux tuning; check the unit")
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
        if not cutoff > 0:  # 0 would drop the bandwidth target and say "targets met"
            r.fail(key, f"must be a positive frequency, got {v!r}; to limit only some "
                        f"channels give a table of them ({{q0 = \"80 MHz\"}})")
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
        if not isinstance(val, list) or len(val) > MAX_ENSEMBLE:
            r.fail(f"cost.{key}", f"expected a list of at most {MAX_ENSEMBLE} values, got "
                                  f"{str(val)[:60]!r}{'...' if len(str(val)) > 60 else ''}")
    det_hz = [parse_quantity(v, "frequency", key=f"cost.ensemble_detunings[{i}]", path=r.path)
              for i, v in enumerate(det)] or [0.0]
    for i, d in enumerate(det_hz):  # a calibration's uncertainty: MHz, not GHz
        if abs(d) > MAX_DETUNING_HZ:
            r.fail(f"cost.ensemble_detunings[{i}]", f"{det[i]!r} is beyond +-1 GHz; check the unit")
    for i, s in enumerate(scales):
        if isinstance(s, bool) or not isinstance(s, int | float) or not 0 < s < 10:
            r.fail(f"cost.ensemble_scales[{i}]", f"expected a factor between 0 and 10 "
                                                 f"(1.0 is the nominal amplitude), got {s!r}")
    scales = scales or [1.0]
    # the ensemble is every combination; each detuning offset applies to every qubit
    grid_d, grid_s = np.meshgrid(np.array(det_hz), np.array(scales, float), indexing="ij")
    detunings = np.repeat(grid_d.reshape(-1, 1), len(system.dims), axis=1)
    return weights, detunings, grid_s.reshape(-1)
