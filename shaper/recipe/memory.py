"""Will a recipe's problem fit in this machine? Refused before anything is allocated.

The estimate counts the propagator slices of the largest program the run builds (carrier
sub-slicing, the line's oversampling, the lab frame's carrier resolution and export
padding included) times the ensemble and the entries of one ``d x d`` matrix; a refusal
names the key that makes the problem big (README, "Limits").
"""

from __future__ import annotations

import math

from shaper.physics.systems import System
from shaper.recipe.schema import ExportSettings, _Reader

# Bytes per (slice x d^2) that one value-and-gradient holds at once: eigenvectors,
# exponentials, the derivative's G matrix, tangents and the pairwise products, complex128
# (16 bytes each), measured within a factor of two on the bundled recipes.
BYTES_PER_ENTRY = 16 * 16
MAX_EXPORT_SAMPLES = 10_000_000
MAX_GRANULARITY = 1_000_000  # samples; AWGs ask for 1 to a few hundred


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


def need_bytes(system: System, samples: int, sample_rate_hz: float, members: int,
               export: ExportSettings, oversample: int = 1,
               lab_phases: int = 0, corrected: bool = False) -> tuple[int, int, dict[str, int]]:
    """What one value-and-gradient of the optimiser holds at once: ``(bytes, slices,
    sub-steps per sample by cause)``.

    The optimiser's slices are the exported samples (padding included) times the finest
    sub-steps any part of the chain needs: the line's ``oversample``, the IF, and every
    drive's carrier offset from the frame. ``lab_phases``: optimised in the lab frame over
    that many carrier phases (its slices resolve the carrier: :mod:`shaper.signal.labdrive`).
    ``corrected``: optimised in the lab frame to second order, whose effective term holds
    every harmonic's matrix per slice: :data:`CORRECTED_FACTOR` times the rotating frame's.
    """
    from shaper.physics.grid import carrier_substeps, substeps

    period = 1 / sample_rate_hz
    exported = -(-samples // export.granularity) * export.granularity
    causes = {"line.oversample": oversample,
              "export.if_frequency": substeps(export.if_frequency_hz, period),
              "system.drive": max([carrier_substeps(c.offset_hz, period)
                                   for c in system.channels] + [1])}
    slices = exported * max(causes.values())
    if lab_phases:
        from shaper.physics.labframe import POINTS_PER_CYCLE, lab_terms
        fastest = lab_terms(system).fastest_hz(abs(export.if_frequency_hz))
        slices = lab_phases * 2 * max(slices, math.ceil(exported * period * fastest
                                                        * POINTS_PER_CYCLE))
    d = system.dimension
    factor = CORRECTED_FACTOR if corrected and not lab_phases else 1
    return (members + 1) * slices * d * d * BYTES_PER_ENTRY * factor, slices, causes


# The second-order lab frame's peak against the rotating frame's on the same problem,
# measured on the memory test's problem (two 5-level transmons, 1600 slices, 11 members):
# 11.8 GB against a 5.6 GB rotating-frame estimate, about 2.1x; taken with a margin.
CORRECTED_FACTOR = 3


def estimate(recipe) -> int:
    """:func:`need_bytes` of a loaded recipe (bytes)."""
    line = recipe.line
    filtered = bool(line.awg.stages) or (line.active and not recipe.export.predistort)
    return need_bytes(recipe.system, recipe.samples, recipe.sample_rate_hz,
                      len(recipe.ensemble_scales), recipe.export,
                      line.oversample if filtered else 1,
                      len(recipe.verdict.phases_rad())
                      if recipe.optimizer.lab_frame == "exact" else 0,
                      recipe.optimizer.lab_frame == "corrected")[0]


def fits_in_memory(r: _Reader, system: System, pulse: dict, members: int,
                   export: ExportSettings, oversample: int = 1, lab_phases: int = 0,
                   corrected: bool = False) -> None:
    """Refuse, before anything is allocated, a problem that cannot fit in this machine,
    naming the key that makes it big (:func:`need_bytes` says what is counted)."""
    n, g = pulse["samples"], export.granularity
    exported = -(-n // g) * g
    if exported > MAX_EXPORT_SAMPLES:
        r.fail("export.granularity", f"padding {n} samples to a multiple of {g} gives "
                                     f"{exported} samples, more than any AWG memory "
                                     f"({MAX_EXPORT_SAMPLES}); check the granularity")
    need, slices, causes = need_bytes(system, n, pulse["sample_rate_hz"], members, export,
                                      oversample, lab_phases, corrected)
    have = available_memory()
    if need > 0.8 * have:
        d, steps = system.dimension, max(causes.values())
        # the factor furthest above what a typical recipe has names the key to change
        typical = {"system.levels": (d * d / 64, "fewer levels"),
                   "pulse.duration": (n / 2000, "a shorter pulse or a lower sample rate"),
                   "cost.ensemble_scales": ((members + 1) / 6, "a smaller ensemble"),
                   "optimizer.lab_frame": (2 * lab_phases or (CORRECTED_FACTOR if corrected
                                                               else 1), "the rotating frame"),
                   "export.granularity": (exported / max(n, 1), "a smaller granularity")}
        cause = max(causes, key=causes.get)
        typical[cause] = (steps / 4, "fewer sub-steps" if cause == "line.oversample" else
                          "a carrier nearer the frame" if cause == "system.drive" else
                          "a smaller IF")
        key = max(typical, key=lambda k: typical[k][0])
        r.fail(key, f"this problem needs about {need / 2**30:.1f} GiB ({slices} propagator "
                    f"slices x {members + 1} system(s) x {d}^2 levels) and this machine has "
                    f"{have / 2**30:.1f} GiB available; this key makes it big: try "
                    f"{typical[key][1]}")


# ----- the time twin: how long judging one file takes, refused before it starts

MAX_VERDICT_S = 600.0  # a check, an export or one file's verdict: longer is a mistake
SAY_VERDICT_S = 60.0  # an estimate past this is said before the work starts
# One propagator slice of a d = 6 system (an eigendecomposition or a Taylor polynomial and
# its share of the products), measured on the 2-core CI machine at 4-5 us (the demo's
# lab-frame check, cr-cnot's d = 49 at 80 us); taken lower, and growing as d^1.5 as
# measured, so the estimate is a floor: only what surely takes too long is refused.
SECONDS_PER_SLICE = 2.5e-6
SENSITIVITY_SCANS = 42  # shaper check: 21 detunings and 21 amplitude scales
LAB_REFINED = 2  # the lab frame's worst phases, run again on twice the sub-steps


def slice_seconds(d: int) -> float:
    """The floor of one propagator slice's time for a ``d x d`` system (seconds)."""
    return SECONDS_PER_SLICE * max(1.0, d / 6) ** 1.5


def verdict_seconds(system: System, verdict, samples: int, sample_rate_hz: float,
                    export: ExportSettings, *, oversample: int = 1, members: int = 1,
                    scans: int = 0) -> tuple[float, float]:
    """A floor of the time one file's verdict takes: ``(rotating-frame seconds, lab-frame
    seconds)``.

    The rotating frame: the exported samples (padding included) times the chain's
    sub-steps, played on the recipe's levels and on ``verdict.extra_levels`` more (each on
    ``s`` and ``2 s`` sub-steps), plus every ensemble member and ``scans`` sensitivity
    points. The lab frame (where the verdict runs it): every carrier phase and the worst
    ones refined, each cell cut to resolve the fastest term (``POINTS_PER_CYCLE`` sub-steps
    per cycle, two slices each), on the more-levels system. ``verdict``: a
    :class:`~shaper.recipe.schema.VerdictSettings`.
    """
    from shaper.physics.grid import carrier_substeps, substeps

    period = 1 / sample_rate_hz
    exported = -(-samples // export.granularity) * export.granularity
    steps = max([oversample, substeps(export.if_frequency_hz, period)]
                + [carrier_substeps(c.offset_hz, period) for c in system.channels])
    more = system.dimension
    if system.lab is not None and verdict.extra_levels:
        more = int(math.prod(n + verdict.extra_levels for n in system.dims))
    plays = 3 * (1 + (more != system.dimension)) + members + scans
    rotating = exported * steps * (plays * slice_seconds(system.dimension)
                                   + 3 * slice_seconds(more))
    if system.lab is None or verdict.lab_frame == "off":
        return rotating, 0.0
    from shaper.physics.labframe import POINTS_PER_CYCLE, lab_terms
    fastest = lab_terms(system).fastest_hz(abs(export.if_frequency_hz))
    per_sample = 2 * max(1, math.ceil(fastest * period * POINTS_PER_CYCLE))
    # the worst phase searched where the second-order model points (four runs, or the
    # fixed phase), the worst refined, and the staircase's figure at the worst phase
    runs = (1 if len(verdict.phases_rad()) == 1 else 4) + LAB_REFINED + 1
    return rotating, exported * per_sample * runs * slice_seconds(more)


def minutes(seconds: float) -> str:
    """A duration as a person reads it: ``"40 s"``, ``"12 min"``, ``"3.1 h"``."""
    if seconds < 120:
        return f"{seconds:.0f} s"
    return f"{seconds / 60:.0f} min" if seconds < 7200 else f"{seconds / 3600:.3g} h"


def fits_in_time(r: _Reader, system: System, pulse: dict, members: int,
                 export: ExportSettings, oversample: int, verdict) -> None:
    """Refuse, before anything runs, a recipe whose every file would take longer than
    :data:`MAX_VERDICT_S` to judge (:func:`verdict_seconds`), naming the key that makes it
    long."""
    rotating, lab = verdict_seconds(system, verdict, pulse["samples"],
                                    pulse["sample_rate_hz"], export, oversample=oversample,
                                    members=members)
    if rotating + lab <= MAX_VERDICT_S:
        return
    n = pulse["samples"]
    exported = -(-n // export.granularity) * export.granularity
    # the factor furthest above a typical recipe's names the key (as fits_in_memory does)
    typical = {"pulse.duration": (n / 2000, "a shorter pulse or a lower sample rate"),
               "export.granularity": (exported / max(n, 1), "a smaller granularity"),
               "system.levels": (system.dimension / 16, "fewer levels"),
               "cost.ensemble_scales": (members / 9, "a smaller ensemble")}
    if lab > rotating:
        typical["verdict.lab_frame"] = (lab / max(rotating, 1e-9) / 50,
                                        "verdict.lab_frame = \"off\" (the rotating frame)")
    key = max(typical, key=lambda k: typical[k][0])
    r.fail(key, f"judging one file of this recipe would take at least {minutes(rotating + lab)}"
                f" ({exported} samples, {system.dimension} levels"
                + (f", the lab frame {minutes(lab)}" if lab else "")
                + f"); at most {minutes(MAX_VERDICT_S)}: try {typical[key][1]}")


def judging_seconds(recipe, samples: int, sample_rate_hz: float, *, export=None,
                    scans: int = 0) -> tuple[float, float]:
    """:func:`verdict_seconds` of a loaded recipe playing a file of ``samples`` samples at
    ``sample_rate_hz`` (``export``: other export settings, e.g. a re-export's)."""
    line = recipe.line
    return verdict_seconds(recipe.system, recipe.verdict, samples, sample_rate_hz,
                           export or recipe.export, members=len(recipe.ensemble_scales),
                           oversample=line.oversample if line.active or line.awg.stages
                           else 1, scans=scans)


def rows_within(recipe, sample_rate_hz: float, *, scans: int = 0) -> int:
    """The most samples a file played on ``recipe`` at ``sample_rate_hz`` may have for its
    verdict to fit in :data:`MAX_VERDICT_S` (the bound on the rows of a checked file)."""
    from dataclasses import replace

    one = sum(judging_seconds(recipe, 1000, sample_rate_hz, scans=scans,
                              export=replace(recipe.export, granularity=1))) / 1000
    return max(1, min(MAX_EXPORT_SAMPLES, int(MAX_VERDICT_S / one)))
