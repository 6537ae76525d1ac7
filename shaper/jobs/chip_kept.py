"""Which duration a chip task keeps (README, "Chips: neighbours"): the sweep's shortest
passing one only if it meets its targets where the chip plays it."""

from __future__ import annotations

from pathlib import Path

from shaper.jobs.chip_pairs import with_neighbours
from shaper.jobs.gateset import optimised_row
from shaper.jobs.run import finish


def kept(task, sweep, shortest: int | None, folder: Path, root: Path, where):
    """The task's optimised gate at the shortest duration that meets its targets where the
    chip plays it: the sweep's shortest passing point first (judged in the sweep's model,
    the rotating frame beside the neighbours), then each longer passing point while the
    kept file misses beside its neighbours in the lab frame or alone
    (:func:`with_neighbours`; README, "Chips: neighbours").
    Returns the exported output, its row and, when a shorter point was passed over, what
    it missed in words ("" otherwise). When every passing point misses there, the
    shortest is kept, its ``why`` naming the longer ones tried; with no passing point at
    all, the longest duration, as the miss."""

    def kept_at(n: int):
        output = finish(sweep.result_at(n), folder / "shortest", plots_too=False, where=where)
        row = optimised_row(output.result.recipe, output.report, folder / "shortest", root)
        row.subject = task.subject
        with_neighbours(task, row, root, where)  # a no-op without neighbours
        return output, row

    tried = [max(sweep.points)] if shortest is None else sorted(
        n for n, p in sweep.points.items() if p.met and n >= shortest)
    passed_over: list[str] = []
    for n in tried:
        output, row = kept_at(n)
        if row.met:
            return output, row, "; ".join(passed_over)
        passed_over.append(f"{row.duration_s * 1e9:.4g} ns: infidelity {row.infidelity:.2e}, "
                           f"leakage {row.leakage:.2e} ({row.missed})")
    if len(tried) > 1:  # none met where the chip plays it: the shortest, as the miss
        output, row = kept_at(tried[0])
        row.why = (f"{row.why} Every longer duration that passed the sweep missed there "
                   f"too: {'; '.join(passed_over[1:])}.").strip()
    return output, row, ""
