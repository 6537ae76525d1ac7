"""Predicted randomized benchmarking of a gate set's files, as the chip plays them.

Each physical gate's map is its file's :attr:`shaper.jobs.playback.Playback.gate_map`
(the verdict's most faithful levels, the instrument's output filter and the line, the lab
frame to second order at the judged worst carrier phase, the recipe's T1/T2 over the
file's footprint, the best frame updates applied); nothing here simulates a file.

**The schedule.** A qubit's sequencer plays its gates on one gate time: every physical
gate occupies one *slot*, as long as the longest footprint (file plus ring-down) of the
set, and a shorter gate is followed by idling to the slot's end; the compilation's idle
slot ("I") is one slot of idling. That is how gates are scheduled in layers across a
chip (each layer as long as its longest gate), and it makes the two-qubit compilation's
padding of the shorter qubit exact in time. The idle is the faithful system's own
evolution without drive (its drift and its T1/T2), no frame update.

**The prediction** (:mod:`shaper.physics.benchmarking`): the 24 Cliffords compiled from
the set's physical gates with virtual Z (``"shortest"`` by default, or ``"table"``), the
exact average over every sequence fitted ``A p^m + B`` (Magesan, Gambetta and Emerson,
Phys. Rev. Lett. 106, 180504 (2011)), recorded beside seeded random sequences at one
length (the cross-check); leakage per Clifford (Wood and Gambetta, Phys. Rev. A 97,
032306 (2018)); interleaved RB of every physical gate with the bound of Magesan et al.,
Phys. Rev. Lett. 109, 080505 (2012); and, to hold the EPC against, the mean infidelity of
the 24 compiled Cliffords (what the EPC equals for gate-independent noise, Magesan et
al. 2011) and the gates' infidelities summed per Clifford. Two-qubit RB of a pair gate
with both qubits' gates is sampled (:mod:`shaper.physics.benchmarking_pairs`), its cost
said before it runs.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence

import numpy as np

from shaper.errors import InputError
from shaper.physics.benchmarking import DEFAULT_LENGTHS, average, clifford_maps, predict_rb
from shaper.physics.clifford import (
    ROTATIONS,
    compile_cliffords,
    op_unitary,
    single_qubit_cliffords,
)
from shaper.physics.gate_maps import QubitMaps, as_superoperator, channel_figures
from shaper.physics.interleaved import predict_interleaved

CROSS_CHECK_SEQUENCES = 200  # random sequences at the cross-check's length
SCHEDULE = ("every physical gate in one slot as long as the longest footprint (file plus "
            "ring-down) of the set, a shorter gate followed by idling to the slot's end "
            "(one gate time per qubit, as a sequencer runs layers of gates); the "
            "compilation's idle slot is one slot of idling")
INCLUDES = ("each file's map as the chip plays it (the verdict's levels, the output filter "
            "and line, the lab frame to second order at the judged worst carrier phase, "
            "the recipe's T1/T2 over the footprint, the best frame updates)", SCHEDULE,
            "virtual Z exact on every level", "leakage (levels above 1 kept)")
LEAVES_OUT = ("state preparation and measurement errors (they move A and B, not p)",
              "drift during the measurement", "crosstalk and neighbours beyond the model",
              "the sequencer's own timing beyond the slot")


def physical(playbacks: Mapping[str, object], *, check: bool = False) -> dict[str, object]:
    """The set's physical gates (X, Y, +-X/2, +-Y/2, ...), their names upper-case.

    Raises:
        InputError: with ``check``, none of them physical.
    """
    out = {str(k).strip().upper(): pb for k, pb in playbacks.items()
           if str(k).strip().upper() in ROTATIONS}
    if check and not out:
        raise InputError(f"no physical gate to benchmark among {', '.join(playbacks)}; "
                         f"give some of {', '.join(ROTATIONS)}")
    return out


def idle_map(playback, seconds: float) -> np.ndarray:
    """``seconds`` of idling on the system ``playback``'s map lives on: its drift and T1/T2,
    no drive, no frame update; a ``(d^2, d^2)`` superoperator."""
    from shaper.physics.corrected import gate_map
    from shaper.physics.targets import gate

    system = playback.faithful.recipe.system
    d = system.dimension
    if seconds <= 0:
        return np.eye(d * d, dtype=complex)
    qubits = int(round(np.log2(len(system.computational))))
    mapped = gate_map(system, gate(["I"] * qubits), np.zeros((1, len(system.controls))),
                      float(seconds), phase_rad=None, start_s=0.0, virtual_z=False)
    return as_superoperator(mapped.get("superoperator", mapped.get("unitary")), d, "idle")


def check_memory(playback, name: str) -> None:
    """Refuse a file whose map would not fit in this machine, before it is built: the map
    of an open system holds about :data:`shaper.recipe.memory.BYTES_PER_ENTRY` bytes per
    slice and superoperator entry (measured: a cross-resonance pair on 4 x 4 levels with
    T1, 2344 slices, asked for 2344 x 16^4 x 256 bytes = 39 GB at once), a closed one the
    same per unitary entry.

    Raises:
        InputError: more than this machine has free, with the figures.
    """
    from shaper.recipe.memory import BYTES_PER_ENTRY, available_memory

    play = playback.faithful
    system = play.recipe.system
    slices = play.chain.finer(2)(play.samples).shape[0]
    entries = system.dimension ** (4 if system.collapse else 2)
    need, free = slices * entries * BYTES_PER_ENTRY, available_memory()
    if need > free:
        raise InputError(f"the map of {name} ({slices} slices on {system.dimension} levels"
                         f"{' with T1/T2' if system.collapse else ''}) needs about "
                         f"{need / 1e9:.3g} GB, {free / 1e9:.3g} GB free")


def _map_of(mapped: dict, name: str) -> np.ndarray:
    d = int(np.prod(mapped["levels"]))
    return as_superoperator(mapped.get("superoperator", mapped.get("unitary")), d, name)


def slot_maps(playbacks: Mapping[str, object], *, slot_s: float | None = None
              ) -> tuple[QubitMaps, dict, dict]:
    """The set's physical gates as one-slot maps (module docstring, "The schedule").

    Args:
        playbacks: gate name -> the :class:`~shaper.jobs.playback.Playback` of its file
            (only physical gates are used).
        slot_s: the slot; default the longest footprint of these gates.

    Returns:
        ``(maps, gates, slot)``: the :class:`~shaper.physics.gate_maps.QubitMaps` (idle:
        one slot), per gate its footprint, padding, the map's infidelity and leakage (the
        padding included) and the verdict's figures, and the slot with its idle's figures.

    Raises:
        InputError: no physical gate, a slot shorter than a footprint, or maps on
            different levels.
    """
    gates = physical(playbacks, check=True)
    for name, pb in gates.items():
        check_memory(pb, name)
    mapped = {name: pb.gate_map for name, pb in gates.items()}
    levels = {tuple(m["levels"]) for m in mapped.values()}
    if len(levels) != 1 or len(next(iter(levels))) != 1:
        raise InputError(f"single-qubit RB needs every gate's map on one transmon's levels; "
                         f"got {sorted(levels)}")
    d = next(iter(levels))[0]
    longest = max(m["footprint_s"] for m in mapped.values())
    slot = longest if slot_s is None else float(slot_s)
    if slot < longest * (1 - 1e-9):
        raise InputError(f"a slot of {slot:.4g} s is shorter than the longest footprint "
                         f"({longest:.4g} s)")
    first = next(iter(gates.values()))
    out, info = {}, {}
    for name, m in mapped.items():
        pad = max(slot - m["footprint_s"], 0.0)
        s = idle_map(first, pad) @ _map_of(m, name)
        out[name] = s
        infidelity, leakage = channel_figures(s, op_unitary(name), (d,))
        judged = gates[name].trusted()
        info[name] = {"footprint_s": m["footprint_s"], "padding_s": pad,
                      "map_infidelity": infidelity, "map_leakage": leakage,
                      "judged_infidelity": judged[0], "judged_leakage": judged[1],
                      "judged_on": judged[2], "carrier_phase_rad": m["phase_rad"],
                      "frame_before_rad": m["frame_before_rad"],
                      "frame_after_rad": m["frame_after_rad"]}
    idle = idle_map(first, slot)
    idle_infidelity, idle_leakage = channel_figures(idle, np.eye(2), (d,))
    slot_info = {"slot_s": slot, "rule": SCHEDULE, "idle_infidelity": idle_infidelity,
                 "idle_leakage": idle_leakage}
    return QubitMaps(d, out, idle), info, slot_info


def gate_independent(maps: QubitMaps, compilation) -> dict:
    """What the EPC is for gate-independent noise: the mean average infidelity of the 24
    compiled Cliffords (Magesan, Gambetta and Emerson 2011), and the gates' own
    infidelities summed per Clifford (the errors simply adding up)."""
    group = single_qubit_cliffords()
    cmaps = clifford_maps(maps, compilation)
    figures = [channel_figures(s, u, (maps.levels,)) for s, u in
               zip(cmaps, group.unitaries, strict=True)]
    own = {g: channel_figures(s, op_unitary(g), (maps.levels,))[0] for g, s in maps.gates.items()}
    idle = channel_figures(maps.idle, np.eye(2), (maps.levels,))[0]
    summed = [sum(own[op] if op in own else idle if op == "I" else 0.0 for op in seq)
              for seq in compilation.sequences]
    return {"mean_clifford_infidelity": float(np.mean([f[0] for f in figures])),
            "mean_clifford_leakage": float(np.mean([f[1] for f in figures])),
            "summed_gate_infidelities": float(np.mean(summed))}


def cross_check(maps: QubitMaps, compilation, rb, *, sequences: int = CROSS_CHECK_SEQUENCES,
                seed: int = 0) -> dict:
    """The exact average against seeded random sequences at one length: the listed length
    nearest ``1 / (1 - p)`` on a log scale (where the decay says most), the longest when
    nothing decays."""
    lengths = np.array(rb.lengths, float)
    p = rb.fit.decay
    scale = 1 / (1 - p) if p < 1 else lengths.max()
    m = int(lengths[np.argmin(np.abs(np.log(lengths / scale)))])
    exact = rb.survival[list(rb.lengths).index(m)]
    means, errors = average(clifford_maps(maps, compilation), [m], maps.levels, "sampled",
                            sequences, seed, None, 0)
    sampled, error = float(means[0, 0]), float(errors[0, 0])
    return {"length": m, "exact": float(exact), "sampled": sampled, "standard_error": error,
            "sequences": sequences, "seed": seed,
            "agree": bool(abs(sampled - exact) <= 3 * error + 1e-12)}


def predict_qubit(playbacks: Mapping[str, object], *, compilation: str = "shortest",
                  lengths: Sequence[int] = DEFAULT_LENGTHS, slot_s: float | None = None,
                  sequences: int = CROSS_CHECK_SEQUENCES, seed: int = 0) -> dict:
    """Predicted single-qubit RB of one qubit's gate set: a JSON-ready block.

    Args:
        playbacks: gate name -> the Playback of its file (non-physical gates are left out).
        compilation: ``"shortest"`` or ``"table"``
            (:func:`shaper.physics.clifford.compile_cliffords`, virtual Z free).
        lengths: sequence lengths of the exact average.
        slot_s: the slot (default the longest footprint).
        sequences, seed: the sampled cross-check's.

    Returns:
        ``{"error_per_clifford", "rb" (the decay and its fit), "leakage_per_clifford",
        "compilation", "slot", "gates", "interleaved", "gate_independent", "cross_check",
        "seconds", ...}``.

    Raises:
        InputError: gates that cannot make every Clifford, or bad maps.
    """
    started = time.perf_counter()
    # refused before any file is played: a set that cannot make every Clifford
    comp = compile_cliffords(list(physical(playbacks, check=True)), method=compilation)
    maps, gates, slot = slot_maps(playbacks, slot_s=slot_s)
    mapped_s = time.perf_counter() - started
    rb = predict_rb(maps, compilation=comp, lengths=lengths)
    check = cross_check(maps, comp, rb, sequences=sequences, seed=seed)
    inter = {}
    for name in maps.gates:
        result = predict_interleaved(maps, name, compilation=comp, lengths=lengths,
                                     reference=rb)
        inter[name] = {k: v for k, v in result.figures().items()
                       if k not in ("reference", "interleaved")}
        inter[name]["p_interleaved"] = result.interleaved.fit.decay
        inter[name]["judged_infidelity"] = gates[name]["judged_infidelity"]
    return {"levels": maps.levels, **_decay(rb),
            "error_per_pulse": rb.error_per_clifford / max(comp.mean_physical, 1e-300),
            "slot": slot, "gates": gates,
            "interleaved": inter, "gate_independent": gate_independent(maps, comp),
            "cross_check": check, "includes": list(INCLUDES), "leaves_out": list(LEAVES_OUT),
            "seconds": {"maps": mapped_s, "total": time.perf_counter() - started}}


def pair_cost(pair_gate: str, gate_names: tuple[Sequence[str], Sequence[str]],
              levels: tuple[int, int], *, lengths: Sequence[int], sequences: int) -> dict:
    """The sampled two-qubit prediction's cost, from the gates' names and levels alone
    (:func:`shaper.physics.benchmarking_pairs.estimate_pair_cost`): said before any file
    is played."""
    from shaper.physics.benchmarking_pairs import estimate_pair_cost
    from shaper.physics.clifford_pairs import pair_cliffords

    comps = tuple(compile_cliffords([g for g in names if g.upper() in ROTATIONS])
                  for names in gate_names)
    return estimate_pair_cost(levels, lengths, sequences,
                              cliffords=pair_cliffords(pair_gate, comps))


def predict_pair(pair_gate: str, pair_playback, playbacks: tuple[Mapping, Mapping], *,
                 lengths: Sequence[int] | None = None, sequences: int = 30, seed: int = 0,
                 max_seconds: float | None = None, echo: Callable[[str], None] = print
                 ) -> dict:
    """Predicted two-qubit RB of a pair gate with both qubits' gates (sampled): a block.

    Both qubits' gates share one slot (the longest footprint of either set, so a layer of
    both lasts one slot); the pair gate lasts its own footprint. Every map must be on the
    pair's levels (q0 first, as the pair's recipe lists its transmons). The cost is said
    through ``echo`` before any file is played.

    Raises:
        InputError: levels that differ, gates that cannot make every Clifford, or an
            estimate above ``max_seconds``.
    """
    from shaper.physics.benchmarking_pairs import DEFAULT_PAIR_LENGTHS, predict_pair_rb

    lengths = tuple(lengths or DEFAULT_PAIR_LENGTHS)
    started = time.perf_counter()
    levels = tuple(pair_playback.faithful.recipe.system.dims)
    cost = pair_cost(pair_gate, tuple(list(physical(p)) for p in playbacks), levels,
                     lengths=lengths, sequences=sequences)
    echo(f"two-qubit RB ({pair_gate}, {'x'.join(map(str, levels))} levels): {sequences} "
         f"sequences of lengths {min(lengths)}-{max(lengths)}, "
         f"{cost['map_applications']:.3g} map applications, about "
         f"{cost['estimated_seconds']:.3g} s once its {1 + sum(map(len, playbacks))} files "
         f"are played")
    if max_seconds is not None and cost["estimated_seconds"] > max_seconds:
        raise InputError(f"two-qubit RB would take about {cost['estimated_seconds']:.3g} s, "
                         f"more than {max_seconds:g} s; use fewer sequences or lengths")
    check_memory(pair_playback, pair_gate)
    slot = max(pb.gate_map["footprint_s"] for p in playbacks for pb in physical(p).values())
    qubit_maps, qubit_gates = [], []
    for p in playbacks:
        maps, gates, _ = slot_maps(p, slot_s=slot)
        qubit_maps.append(maps)
        qubit_gates.append(gates)
    if (qubit_maps[0].levels, qubit_maps[1].levels) != levels:
        raise InputError(f"the qubits' maps are on {qubit_maps[0].levels}x"
                         f"{qubit_maps[1].levels} levels, the pair gate's on "
                         f"{'x'.join(map(str, levels))}")
    mapped = pair_playback.gate_map
    rb = predict_pair_rb(pair_gate, _map_of(mapped, pair_gate), tuple(qubit_maps),
                         lengths=lengths, sequences=sequences, seed=seed)
    judged = pair_playback.trusted()
    return {"levels": list(levels), "pair_gate": pair_gate, **_decay(rb), "cost_stated": cost,
            "slot": {"slot_s": slot, "rule": SCHEDULE,
                     "pair_gate_footprint_s": mapped["footprint_s"]},
            "pair": {"judged_infidelity": judged[0], "judged_leakage": judged[1],
                     "judged_on": judged[2], "carrier_phase_rad": mapped["phase_rad"],
                     "frame_before_rad": mapped["frame_before_rad"],
                     "frame_after_rad": mapped["frame_after_rad"]},
            "gates": qubit_gates, "includes": list(INCLUDES), "leaves_out": list(LEAVES_OUT),
            "seconds": {"total": time.perf_counter() - started}}


def _decay(rb) -> dict:
    """A :class:`shaper.physics.benchmarking.Benchmark`'s figures as the block holds them."""
    figures = rb.figures()
    leak = figures["leakage"]
    return {"qubits": rb.qubits, "error_per_clifford": rb.error_per_clifford,
            "error_per_clifford_error": rb.error_per_clifford_error,
            "leakage_per_clifford": None if leak is None else leak["leakage_per_clifford"],
            "compilation": figures["compilation"],
            "rb": {k: v for k, v in figures.items() if k != "compilation"}}
