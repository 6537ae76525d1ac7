"""A waveform file as the chip plays it: every figure a report, a check or a verdict gives.

:class:`Playback` is built once per file (recipe, waveform, its samples and its chain,
:mod:`shaper.signal.chain`); every figure block is computed from it, each re-simulation
once (a cache per block). ``shaper optimize``, ``check``, ``export``, ``sweep``, gate sets
and chips all judge through :meth:`Playback.verdict`.

How far each figure is trusted (README, "How far the figures are trusted"):

- ``nominal``: the recipe's model in the rotating frame, its own levels: what the
  optimiser saw (to about 1e-12 after the sub-step extrapolation);
- ``more_levels``: the same file on every transmon with ``verdict.extra_levels`` more
  levels (the truncation's error);
- ``lab``: the same file with the drive's counter-rotating terms (no rotating-wave
  approximation, :mod:`shaper.physics.labframe`), on the more-levels system, worst over
  the carrier phase at the pulse start.

The verdict is judged on the most faithful figures computed: the lab frame on the
more-levels system where the model knows its lab frame, else the more-levels rotating
frame, else the nominal figures. Ensemble members stay in the rotating frame at the
recipe's levels (the report says so).
"""

from __future__ import annotations

from dataclasses import replace
from functools import cached_property

import numpy as np

from shaper.costs.problem import has_ensemble, recipe_layout
from shaper.costs.verdict import Verdict, judge
from shaper.io import waveio
from shaper.physics.lab_simulation import LabSimulation
from shaper.physics.simulation import Simulation, simulate
from shaper.recipe import Recipe
from shaper.signal.chain import extrapolated, for_waveform, line_columns
from shaper.signal.mixer import Mixer


def played_on(recipe: Recipe, chain, samples: np.ndarray, **flags) -> Simulation:
    """The rotating-frame figures of ``samples`` through ``chain`` on its own slices (their
    means and slopes: :meth:`shaper.signal.chain.Chain.cells`)."""
    means, slopes = chain.cells(samples)
    return simulate(recipe.system, recipe.target, means, chain.dt_s, slopes=slopes, **flags)


class Playback:
    """One waveform file on one recipe's system, as the instrument plays it.

    Attributes:
        recipe, wave: what is played and on what.
        samples: ``(n, k)`` the file's samples in Hz (still carrying any IF).
        chain: the file's signal chain (mixer and line of the recipe).
    """

    def __init__(self, recipe: Recipe, wave: waveio.Waveform, *, progress=None):
        self.recipe, self.wave = recipe, wave
        self.samples = wave.to_hz(recipe.system)
        self._played: dict[tuple, Simulation] = {}
        self.progress = progress  # called with a line as long figures run (or None)

    @cached_property
    def chain(self):
        """The file's signal chain (built when a figure first needs it: the samples alone,
        :meth:`intended` and :meth:`baseband`, do not)."""
        return for_waveform(self.recipe, self.wave)

    def played(self, *, line: bool = True, mixer: bool = True,
               extrapolate: bool = True) -> Simulation:
        """Figures in the rotating frame (the recipe's model), once per variant.

        The chain includes the recipe's mixer and line unless ``mixer``/``line`` is False.
        Where it runs on sub-steps (an IF, a line, a carrier offset), the figures on ``s``
        and ``2 s`` sub-steps per sample are extrapolated (Richardson; the sub-step error
        falls as 1/s^4 with the slopes: :func:`shaper.signal.chain.extrapolated`);
        ``extrapolate=False`` gives the figures on the chain's own ``s`` (what the
        optimiser saw).
        """
        key = (line, mixer, extrapolate)
        if key not in self._played:
            self._played[key] = self._simulate(line, mixer, extrapolate)
        return self._played[key]

    def _simulate(self, line: bool, mixer: bool, extrapolate: bool) -> Simulation:
        recipe = self.recipe
        chain = self.chain if (line and mixer) else for_waveform(recipe, self.wave, line=line,
                                                                 mixer=mixer)
        flags = dict(virtual_z=recipe.virtual_z, method=recipe.optimizer.propagator)
        if chain.identity:
            return simulate(recipe.system, recipe.target, self.samples, chain.dt_s, **flags)
        steps = chain.steps
        if not extrapolate:
            coarse = played_on(recipe, chain, self.samples, **flags)
            return replace(coarse, populations=coarse.populations[:, ::steps])
        coarse, fine = (played_on(recipe, c, self.samples, **flags)
                        for c in (chain, chain.finer(2)))
        fidelity = extrapolated(coarse.fidelity, fine.fidelity)
        leak = extrapolated(coarse.leakage, fine.leakage)
        return replace(fine, fidelity=fidelity, infidelity=1 - fidelity, leakage=leak,
                       populations=fine.populations[:, ::2 * steps])

    @property
    def nominal(self) -> Simulation:
        """The rotating-frame figures with the recipe's line and mixer."""
        return self.played()

    @cached_property
    def members(self) -> tuple[list, list] | None:
        """Infidelity and leakage of every ensemble member (rotating frame, the recipe's
        levels), or None without an ensemble. With sub-steps the members are simulated on
        the chain's own grid (accurate to about 1e-9)."""
        if not has_ensemble(self.recipe):
            return None
        from shaper.jobs.robustness import member_figures
        return member_figures(self.recipe, self.chain, self.samples)

    @cached_property
    def more_levels(self) -> Playback | None:
        """The same file on every transmon with ``verdict.extra_levels`` more levels
        (None: no extra levels asked, or a model whose matrices fix its levels: its
        :attr:`~shaper.recipe.models.Model.level_tables` is None)."""
        from shaper.recipe.derive import sets_levels, with_levels

        extra = self.recipe.verdict.extra_levels
        if not extra or not sets_levels(self.recipe):
            return None
        return Playback(with_levels(self.recipe, extra=extra), self.wave,
                        progress=self.progress)

    @property
    def faithful(self) -> Playback:
        """The playback whose system is the most faithful: with more levels if asked."""
        return self.more_levels or self

    @cached_property
    def lab(self) -> LabSimulation | None:
        """The lab-frame figures on the most faithful system, worst over the carrier
        phase (None where the verdict leaves the lab frame off or the model has none)."""
        return self._lab(awg=True)

    @cached_property
    def staircase(self) -> LabSimulation | None:
        """The same file in the lab frame from an instrument with no output filter (an
        ideal staircase), at the judged worst carrier phase, on the recipe's own levels:
        the other end of what an instrument can play (README, "The AWG's analog
        output"). None where there is no lab frame or the recipe's output is already a
        staircase."""
        if not self.recipe.line.awg.stages or self.lab is None:
            return None
        worst = self.lab.phases_rad[int(np.argmax(self.lab.infidelities))]
        return self._lab(awg=False, phases=(worst,), own_levels=True)

    @cached_property
    def corrected(self) -> dict | None:
        """The lab frame to second order (:mod:`shaper.physics.effective`) on the most
        faithful system at many carrier phases, extrapolated like :meth:`played`: the
        phase dependence the exact lab frame is searched by, at the rotating frame's cost
        (:func:`shaper.jobs.played_lab.second_order`). None where it does not hold."""
        from shaper.jobs.played_lab import second_order
        return second_order(self)

    @cached_property
    def gate_map(self) -> dict:
        """The file's map as the chip plays it, for predicted benchmarking: the most
        faithful levels, the instrument's output and the line on the rotating frame's grid
        (extrapolated like :meth:`played` is not: the chain's own ``2 s`` slices), the lab
        frame to second order at the judged worst carrier phase (or the fixed one), the
        recipe's T1/T2 over the footprint (:func:`shaper.physics.corrected.gate_map`), the
        best frame updates applied. Keys: ``unitary`` or ``superoperator``, ``levels``,
        ``computational``, ``footprint_s``, ``phase_rad``, the frame angles."""
        from shaper.jobs.played_lab import played_map
        return played_map(self)

    def _lab(self, *, awg: bool, phases=None, own_levels: bool = False) -> LabSimulation | None:
        from shaper.jobs.played_lab import lab_figures
        return lab_figures(self, awg=awg, phases=phases, own_levels=own_levels)

    def trusted(self) -> tuple[float, float, str]:
        """(infidelity, leakage, what they are): the most faithful figures computed."""
        play = self.faithful
        levels = "x".join(map(str, play.recipe.system.dims))
        if self.lab is not None:
            phases = self.recipe.verdict.phases_rad()
            worst = np.degrees(self.lab.figures()["worst_phase_rad"])
            how = (f"at carrier phase {np.degrees(phases[0]):g} deg" if len(phases) == 1
                   else f"worst carrier phase ({worst:.3g} deg)")
            return self.lab.infidelity, self.lab.leakage, f"lab frame, {levels} levels, {how}"
        sim = play.nominal
        return sim.infidelity, sim.leakage, f"rotating frame, {levels} levels"

    def trust_block(self) -> dict:
        """The report's ``trust`` block: every model's figures of this file, and which the
        verdict is judged on."""
        infidelity, leakage, basis = self.trusted()
        out = {"judged_on": basis, "model": model_words(self.recipe.system),
               "infidelity": infidelity, "leakage": leakage,
               "output": self.output_block(),
               "rotating_frame": {"levels": list(self.recipe.system.dims),
                                  "infidelity": self.nominal.infidelity,
                                  "leakage": self.nominal.leakage}}
        if self.more_levels is not None:
            sim = self.more_levels.nominal
            out["more_levels"] = {"levels": list(self.more_levels.recipe.system.dims),
                                  "infidelity": sim.infidelity, "leakage": sim.leakage}
        if self.lab is not None:
            out["lab_frame"] = {"levels": list(self.faithful.recipe.system.dims),
                                **self.lab.figures()}
        if self.staircase is not None:
            out["staircase"] = {"infidelity": self.staircase.infidelity,
                                "leakage": self.staircase.leakage,
                                "what": "the same file in the lab frame from an instrument "
                                        "with no output filter (an ideal staircase), at the "
                                        "judged worst carrier phase, on the recipe's levels"}
        if self.corrected is not None:
            worst = np.max(self.corrected["figures"], axis=0)
            out["second_order"] = {"infidelity": float(worst[0]), "leakage": float(worst[1]),
                                   "what": "the lab frame to second order in the "
                                           "counter-rotating terms (the optimiser's model "
                                           "with optimizer.lab_frame = \"corrected\"), "
                                           f"worst of {len(self.corrected['phases_rad'])} "
                                           f"carrier phases"}
        if self.members is not None:
            out["ensemble"] = "rotating frame, the recipe's levels"
        if self.idle is not None:
            out["idle"] = self.idle
        return out

    def output_block(self) -> dict:
        """What the chip is assumed to receive and for how long: the instrument's output
        filter (and whether it was assumed), the file's length, the ring-down after it
        and the footprint (the time before the next gate may start)."""
        from shaper.jobs.played_lab import output_block
        return output_block(self)

    @cached_property
    def idle(self) -> dict | None:
        """A gate beside spectators (``[gate] on``): the same system left alone for the
        pulse's duration, every qubit's identity the target, virtual Z on every qubit. What
        remains is the conditional phase of the static ZZ, which no frame update undoes
        (README, "Chips: neighbours"); the explanation weighs a miss against it. None
        without spectators."""
        recipe = self.recipe
        acting = recipe.raw.get("gate", {}).get("on")
        if not acting or len(acting) >= len(recipe.system.dims) or not recipe.target.is_gate:
            return None
        from shaper.physics.targets import gate

        dt = 1.0 / self.wave.sample_rate_hz
        still = simulate(recipe.system, gate(["I"] * len(recipe.system.dims)),
                         np.zeros_like(self.samples), dt, virtual_z=True,
                         method=recipe.optimizer.propagator)
        return {"duration_s": len(self.samples) * dt, "infidelity": still.infidelity,
                "leakage": still.leakage}

    def verdict(self) -> Verdict:
        """The one rule (:mod:`shaper.costs.verdict`) without margin, on the most faithful
        figures (:meth:`trusted`) and the ensemble's."""
        infidelity, leakage, basis = self.trusted()
        members = self.members or (None, None)
        return judge(self.recipe, infidelity=infidelity, leakage=leakage,
                     member_infidelities=members[0], member_leakages=members[1],
                     out_of_band=self.band_fraction, basis=basis)

    @cached_property
    def open_system(self) -> dict | None:
        """The error budget on the open system (README, "Decoherence"), over the file's
        whole footprint (the file as written, its padding included, and the output's
        ring-down after it: ``over``): ``coherent_error`` the judged figure
        (:meth:`trusted`, the pulse's fault), ``incoherent_error`` what T1/T2 add (the
        channel's infidelity minus the closed system's, both in the rotating frame on the
        recipe's levels: ``channel``), ``infidelity`` and ``leakage`` the two together.
        None without coherence times or for a state target."""
        recipe = self.recipe
        if not recipe.system.collapse or not recipe.target.is_gate:
            return None
        from shaper.physics.simulation import simulate_open

        means, slopes = self.chain.cells(self.samples)
        result = simulate_open(recipe.system, recipe.target, means, self.chain.dt_s,
                               virtual_z=recipe.virtual_z, closed=self.nominal, slopes=slopes)
        judged, judged_leakage, basis = self.trusted()
        output = self.output_block()
        return {"infidelity": judged + result.incoherent_error,
                "leakage": judged_leakage + result.leakage - self.nominal.leakage,
                "coherent_error": judged, "coherent_basis": basis,
                "incoherent_error": result.incoherent_error,
                "frame_before_rad": result.frame_before_rad,
                "frame_after_rad": result.frame_after_rad,
                "channel": {"infidelity": result.infidelity, "leakage": result.leakage,
                            "closed_infidelity": result.coherent_error,
                            "closed_leakage": self.nominal.leakage,
                            "basis": "rotating frame, the recipe's levels"},
                "coherence_times": recipe.system.coherence,
                "over": {"file_s": output["file_s"], "ring_down_s": output["ring_down_s"],
                         "footprint_s": output["footprint_s"],
                         "what": "T1/T2 act over the file as written (its padding included) "
                                 "and the output's ring-down after it"}}

    def intended(self) -> np.ndarray:
        """The samples (Hz) the file means the chip to see, averaged per sample: its own,
        with any mixer correction and pre-distortion undone (still carrying the IF)."""
        recipe, wave = self.recipe, self.wave
        samples = self.samples.copy()
        if wave.mixer_corrected:
            samples = Mixer.for_recipe(recipe, wave.full_scale_hz).plays(samples)
        if wave.predistorted:
            from shaper.signal.line import through_line
            for column, stages in line_columns(recipe, awg=False):  # the inverted line
                samples[:, column] = through_line(samples[:, column], stages,
                                                  1 / wave.sample_rate_hz,
                                                  max(recipe.line.oversample, 1))
        return samples

    def baseband(self) -> np.ndarray:
        """The envelope the optimiser shaped: :meth:`intended` without the IF (for a
        pre-distorted or mixer-corrected file, what it means the chip to see)."""
        samples, wave = self.intended(), self.wave
        if wave.if_frequency_hz:
            from shaper.signal.modulation import demodulate
            samples = demodulate(samples, self.recipe.system.iq_columns(),
                                 wave.if_frequency_hz, 1 / wave.sample_rate_hz, wave.sideband,
                                 start=wave.pulse_start)
        return samples

    @cached_property
    def band_fraction(self) -> float | None:
        """The out-of-band fraction as the bandwidth cost measures it (on the baseband
        envelope, :func:`shaper.costs.out_of_band`); None without a bandwidth."""
        recipe = self.recipe
        if not recipe.bandwidth_hz:
            return None
        from shaper.costs import out_of_band
        from shaper.costs.terms import band_limited
        iq, bb, cutoffs = band_limited(recipe, recipe_layout(recipe))
        return float(out_of_band(self.baseband(), 1 / self.wave.sample_rate_hz, cutoffs, iq,
                                 bb))

    def line_block(self) -> dict | None:
        """The report's ``line`` block: the figures with the line, without it, and on the
        optimiser's own grid (its convergence). None without a line."""
        recipe = self.recipe
        if not recipe.line.active:
            return None
        played, ideal = self.nominal, self.played(line=False)
        own = self.played(extrapolate=False)
        return {"channels": {name: [s.summary() for s in stages]
                             for name, stages in recipe.line.stages.items()},
                "oversample": recipe.line.oversample,
                "in_the_loop": not recipe.export.predistort,
                "with_line": {"infidelity": played.infidelity, "leakage": played.leakage},
                "without_line": {"infidelity": ideal.infidelity, "leakage": ideal.leakage},
                "at_oversample": {"infidelity": own.infidelity, "leakage": own.leakage},
                "predistorted": self.wave.predistorted,
                "predistortion_residual": self.wave.predistortion_residual}

    def sensitivity(self, detunings: np.ndarray, scales: np.ndarray) -> dict:
        """Infidelity of this file against a detuning offset and an amplitude scale (the
        recipe's model, the chain's grid), with the first-order slopes
        (:func:`shaper.jobs.robustness.sensitivity`)."""
        from shaper.jobs.robustness import sensitivity
        return sensitivity(self.recipe, self.chain, self.samples, detunings, scales)


def system_model(system) -> dict:
    """The reports' ``system_model`` block, always a dict: ``{"kind": "transmons",
    "transmons": {name: its spectrum and parameters}}`` for a system of transmon ladders
    (E_J and E_C for the charge model), ``{"kind": "matrices"}`` for one given by its
    matrices."""
    if not system.models:
        return {"kind": "matrices"}
    return {"kind": "transmons", "transmons": dict(system.models)}


def model_words(system) -> str:
    """Which model the figures come from, in words: the transmon spectrum of every
    transmon, how many are simulated together, and that no other qubit is."""
    spectra = sorted({m["spectrum"] for m in system.models.values()})
    if not spectra:
        return "the recipe's matrices"
    kind = {"duffing": "Duffing", "charge": "charge-model (Cooper-pair box)"}
    names = " and ".join(kind.get(x, x) for x in spectra)
    count = len(system.models)
    if count == 1:
        return f"one {names} transmon, no neighbours"
    return f"{count} {names} transmons simulated together, no other neighbours"
