"""The lab-frame figures of a played file (:class:`shaper.jobs.playback.Playback`'s
``lab``, ``staircase``, ``corrected``, ``gate_map`` and output block): the exact lab frame
and its phase search, the second-order model that guides it, the file's whole map, what
the chip receives and for how long (README, "The lab frame", "The AWG's analog output")."""

from __future__ import annotations

import numpy as np

from shaper.signal.analog import FINE
from shaper.signal.chain import extrapolated, for_waveform, ring_angle

GUIDE_PHASES = 64  # carrier phases of the second-order model (each costs two kicks)


def lab_figures(playback, *, awg: bool, phases=None, own_levels: bool = False):
    """The exact lab frame of the file (``awg``: through the instrument's output filter,
    else as an ideal staircase), at ``phases`` or the verdict's fixed one, else the worst
    searched (guided by :func:`second_order` where it holds); None without a lab frame."""
    v = playback.recipe.verdict
    if v.lab_frame == "off" or playback.recipe.system.lab is None:
        return None
    from shaper.physics.lab_simulation import simulate_lab

    play = playback if own_levels else playback.faithful
    recipe = play.recipe
    chain = play.chain if awg else for_waveform(recipe, play.wave, awg=False)
    n = play.samples.shape[0]
    before = chain.before((0.5,), n)
    fixed = v.phases_rad() if len(v.phases_rad()) == 1 else phases
    guide = playback.corrected if awg and fixed is None and not v.spread else None
    say = playback.progress
    return simulate_lab(recipe.system, recipe.target,
                        lambda offsets, halved: chain.lab_envelope(
                            play.samples, offsets, FINE // 2 if halved else FINE),
                        before + chain.played_samples(n), chain.period_s,
                        start_s=-(before + chain.start) * chain.period_s,
                        phases_rad=fixed, phase_count=v.carrier_phases,
                        envelope_hz=chain.turning_hz, virtual_z=recipe.virtual_z,
                        exact_envelope=chain.resolution(n) == 0.0,
                        guide=None if guide is None else (guide["phases_rad"],
                                                          guide["figures"]),
                        progress=None if say is None else (
                            say if awg else lambda text: say(f"ideal staircase, {text}")),
                        floor=0.01 * min(recipe.optimizer.target_infidelity,
                                         recipe.optimizer.target_leakage))


def second_order(playback) -> dict | None:
    """The lab frame to second order at :data:`GUIDE_PHASES` phases (extrapolated from
    ``s`` and ``2 s`` slices per sample), or None (no lab frame, a resonance, or a drive
    played as an ideal staircase: its steps' counter-rotating error is not second order in
    anything small, measured 0.44 against 1e-4 exactly)."""
    v = playback.recipe.verdict
    if v.lab_frame == "off" or playback.recipe.system.lab is None:
        return None
    from shaper.physics.corrected import simulate_corrected

    play = playback.faithful
    recipe, chain = play.recipe, play.chain
    filtered = {c for c, _ in chain.line}
    if not all(int(c) in filtered for c in np.ravel(chain.iq_columns)):
        return None
    phases = np.pi * np.arange(GUIDE_PHASES) / GUIDE_PHASES
    try:
        runs = [simulate_corrected(recipe.system, recipe.target, means, c.dt_s,
                                   phases_rad=phases, start_s=-c.start * c.period_s,
                                   virtual_z=recipe.virtual_z, slopes=slopes)
                for c in (chain, chain.finer(2)) for means, slopes in [c.cells(play.samples)]]
    except ValueError:
        return None
    return {"phases_rad": phases, "figures": extrapolated(runs[0], runs[1])}


def played_map(playback) -> dict:
    """The file's whole map as the chip plays it (:func:`shaper.physics.corrected.gate_map`
    on the faithful levels, the chain's ``2 s`` slices, the second-order lab frame at the
    judged worst phase, T1/T2 over the footprint)."""
    from shaper.physics.corrected import gate_map

    play = playback.faithful
    recipe, chain = play.recipe, play.chain.finer(2)
    phase = None
    if playback.lab is not None and playback.corrected is not None:
        phase = playback.lab.phases_rad[int(np.argmax(playback.lab.infidelities))]
    means, slopes = chain.cells(play.samples)
    mapped = gate_map(recipe.system, recipe.target, means, chain.dt_s,
                      phase_rad=phase, start_s=-chain.start * chain.period_s,
                      virtual_z=recipe.virtual_z, slopes=slopes)
    return {**mapped, "levels": list(recipe.system.dims),
            "computational": [int(i) for i in recipe.system.computational],
            "footprint_s": chain.played_samples(play.samples.shape[0]) * chain.period_s,
            "phase_rad": phase}


def output_block(playback) -> dict:
    """What the chip is assumed to receive and for how long: the instrument's output filter
    (and whether it was assumed), the file's length, the ring-down after it and the
    footprint (the time before the next gate may start)."""
    chain, awg = playback.chain, playback.recipe.line.awg
    n = playback.samples.shape[0]
    period = chain.period_s
    return {"awg": awg.summary(),
            "assumed": (f"assumed: the instrument plays {awg.words()} (no [awg] in the "
                        f"recipe; give your instrument's from its datasheet)")
            if awg.assumed else f"the instrument plays {awg.words()}",
            "file_s": n * period, "ring_down_s": chain.ring * period,
            "footprint_s": chain.played_samples(n) * period,
            "ring_residual_rad": chain.ring_residual_rad,
            "settled": chain.ring_residual_rad <= ring_angle(playback.recipe) * (1 + 1e-9)}
