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
               lab_phases: int = 0) -> tuple[int, int, dict[str, int]]:
    """What one value-and-gradient of the optimiser holds at once: ``(bytes, slices,
    sub-steps per sample by cause)``.

    The optimiser's slices are the exported samples (padding included) times the finest
    sub-steps any part of the chain needs: the line's ``oversample``, the IF, and every
    drive's carrier offset from the frame. ``lab_phases``: optimised in the lab frame over
    that many carrier phases (its slices resolve the carrier: :mod:`shaper.signal.labdrive`).
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
    return (members + 1) * slices * d * d * BYTES_PER_ENTRY, slices, causes


def estimate(recipe) -> int:
    """:func:`need_bytes` of a loaded recipe (bytes)."""
    line = recipe.line
    filtered = bool(line.awg.stages) or (line.active and not recipe.export.predistort)
    return need_bytes(recipe.system, recipe.samples, recipe.sample_rate_hz,
                      len(recipe.ensemble_scales), recipe.export,
                      line.oversample if filtered else 1,
                      len(recipe.verdict.phases_rad())
                      if recipe.optimizer.lab_frame == "exact" else 0)[0]


def fits_in_memory(r: _Reader, system: System, pulse: dict, members: int,
                   export: ExportSettings, oversample: int = 1, lab_phases: int = 0) -> None:
    """Refuse, before anything is allocated, a problem that cannot fit in this machine,
    naming the key that makes it big (:func:`need_bytes` says what is counted)."""
    n, g = pulse["samples"], export.granularity
    exported = -(-n // g) * g
    if exported > MAX_EXPORT_SAMPLES:
        r.fail("export.granularity", f"padding {n} samples to a multiple of {g} gives "
                                     f"{exported} samples, more than any AWG memory "
                                     f"({MAX_EXPORT_SAMPLES}); check the granularity")
    need, slices, causes = need_bytes(system, n, pulse["sample_rate_hz"], members, export,
                                      oversample, lab_phases)
    have = available_memory()
    if need > 0.8 * have:
        d, steps = system.dimension, max(causes.values())
        # the factor furthest above what a typical recipe has names the key to change
        typical = {"system.levels": (d * d / 64, "fewer levels"),
                   "pulse.duration": (n / 2000, "a shorter pulse or a lower sample rate"),
                   "cost.ensemble_scales": ((members + 1) / 6, "a smaller ensemble"),
                   "optimizer.lab_frame": (2 * lab_phases or 1, "the rotating frame"),
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
