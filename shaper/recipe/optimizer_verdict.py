"""The ``[optimizer]`` and ``[verdict]`` sections: how to search and how a file is judged,
and the optimiser's model of the lab frame resolved against the verdict's (README,
"Recipe reference", "The lab frame")."""

from __future__ import annotations

from shaper.physics.systems import System
from shaper.recipe.models import check_more_levels
from shaper.recipe.schema import (
    ENSEMBLE_RULES,
    GUESSES,
    LAB_FRAME,
    LAB_MODES,
    MAX_SEED,
    MAX_STARTS,
    METHODS,
    OptimizerSettings,
    VerdictSettings,
    _Reader,
)


def read_optimizer(r: _Reader, t: dict) -> OptimizerSettings:
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
                                   d.target_infidelity, positive=True, below=1),
        target_leakage=r.number(t, "target_leakage", "optimizer.target_leakage",
                                d.target_leakage, positive=True, below=1),
        margin=r.number(t, "margin", "optimizer.margin", d.margin, minimum=1.0),
        max_time_s=r.number(t, "max_time", "optimizer.max_time", d.max_time_s, kind="time",
                            positive=True, bare_check=False),
        stall_iterations=r.number(t, "stall_iterations", "optimizer.stall_iterations",
                                  d.stall_iterations, integer=True, minimum=1),
        seed=r.number(t, "seed", "optimizer.seed", d.seed, integer=True, minimum=0,
                      maximum=MAX_SEED),
        starts=r.number(t, "starts", "optimizer.starts", d.starts, integer=True, minimum=1,
                        maximum=MAX_STARTS),
        initial=initial,
        drag_scale=r.number(t, "drag_scale", "optimizer.drag_scale", d.drag_scale),
        learning_rate=r.number(t, "learning_rate", "optimizer.learning_rate", d.learning_rate,
                               positive=True, maximum=10),  # the parameters are of order 1
        propagator=r.choice(t, "propagator", "optimizer.propagator", ("eigh", "pade"),
                            d.propagator),
        ensemble_targets=r.choice(t, "ensemble_targets", "optimizer.ensemble_targets",
                                  ENSEMBLE_RULES, d.ensemble_targets),
        open_system=r.flag(t, "open_system", "optimizer.open_system", d.open_system),
        lab_frame=_lab_mode(r, t),
        escalate=r.flag(t, "escalate", "optimizer.escalate", d.escalate))


def _lab_mode(r: _Reader, t: dict) -> str:
    """``optimizer.lab_frame``: a mode of :data:`LAB_MODES` (true and false, the older
    spelling, are "exact" and "off"); "auto" is resolved by :func:`resolve_lab` once the
    system and the verdict are known."""
    value = t.get("lab_frame", "auto")
    if isinstance(value, bool):
        return "exact" if value else "off"
    return r.choice(t, "lab_frame", "optimizer.lab_frame", LAB_MODES, "auto")


def resolve_lab(r: _Reader, optimizer: OptimizerSettings, system: System,
                 verdict: VerdictSettings, filtered: bool = True) -> OptimizerSettings:
    """The optimiser's model of the counter-rotating terms: "auto" is "corrected" wherever
    the verdict judges a lab frame and the correction holds (a closed system, an output
    filter: ``filtered``, no resonant counter-rotating process), else "off" (README, "The
    lab frame"). An ideal staircase's steps carry counter-rotating error the second-order
    model does not see (measured: 0.44 where the lab frame gives 1e-4)."""
    from dataclasses import replace

    mode = optimizer.lab_frame
    judged = system.lab is not None and verdict.lab_frame != "off"
    if mode == "auto":
        mode = "corrected" if judged and filtered and not optimizer.open_system else "off"
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


def read_verdict(r: _Reader, t: dict, system: System) -> VerdictSettings:
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
    check_more_levels(r, t, system, extra)
    return VerdictSettings(lab_frame=lab, carrier_phase_deg=phase, carrier_phases=phases,
                           spread="carrier_phases" in t,
                           benchmark=r.flag(t, "benchmark", "verdict.benchmark", True),
                           extra_levels=extra)

