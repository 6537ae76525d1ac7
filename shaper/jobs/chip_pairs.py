"""A chip's coupled pairs as they sit idle: the static ZZ of each (exact diagonalisation of
the pair's own static Hamiltonian), written to ``chip-pairs.csv``, ``chip.md`` and the page
(README, "Chips")."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from shaper.io import atomic
from shaper.recipe.chip import Chip


def pair_zz(chip: Chip) -> list[dict]:
    """The static ZZ of every coupled pair at rest (flux at its idle point, drives off), by
    exact diagonalisation of the pair's own static Hamiltonian as its gate task builds it
    (:func:`shaper.physics.transmons.static_zz`; README, "Chips")."""
    from shaper.errors import InputError
    from shaper.physics.transmons import static_zz
    from shaper.recipe import load_recipe

    out = []
    for task in chip.tasks:
        system = task.recipe.get("system", {})
        if system.get("model") != "transmons" or len(system.get("transmon", [])) != 2:
            continue
        recipe = load_recipe(task.recipe)
        coupling = system["coupling"][0]
        try:
            zz = static_zz(recipe.system.lab.static, recipe.system.dims)
        except InputError:
            zz = None  # hybridised at rest: no ZZ to speak of (said in the table)
        out.append({"pair": task.subject, "strength": str(coupling["strength"]),
                    "levels": "x".join(map(str, recipe.system.dims)), "static_zz_hz": zz})
    return out


def _khz(zz_hz: float | None) -> str:
    return "hybridised" if zz_hz is None else f"{zz_hz / 1e3:.1f} kHz"


def write_pairs(out: Path, pairs: list[dict]) -> Path:
    """``chip-pairs.csv`` and a section of ``chip.md``: every coupled pair's static ZZ."""
    lines = ["pair,coupling,levels,static_zz_hz"] + [
        f"{p['pair']},{p['strength']},{p['levels']},"
        f"{'' if p['static_zz_hz'] is None else format(p['static_zz_hz'], '.6e')}"
        for p in pairs]
    path = out / "chip-pairs.csv"
    atomic.write_text(path, "\n".join(lines) + "\n")
    table = ["", "## Static ZZ of each coupled pair", "",
             "At rest (flux at its idle point, drives off), by exact diagonalisation of the "
             "pair's static Hamiltonian (charge coupling, the chip's levels); no other "
             "neighbour is modelled.", "", "| pair | coupling | levels | static ZZ |",
             "|---|---|---|---|"] + [
        f"| {p['pair']} | {p['strength']} | {p['levels']} | {_khz(p['static_zz_hz'])} |"
        for p in pairs]
    atomic.write_text(out / "chip.md", (out / "chip.md").read_text() + "\n".join(table) + "\n")
    return path


def neighbourhood(chip: Chip, subject: str):
    """The qubit ``subject`` with its coupled neighbours at rest, as the chip's pair tasks
    hold them: ``(system, neighbour names)``, the qubit first (its frame, its drive), each
    neighbour not driven and, if tunable, at its idle point. None without neighbours."""
    from shaper.physics.transmons import TransmonSpec, coupled_transmons
    from shaper.recipe.units import parse_quantity

    def hz(value, key):
        return parse_quantity(value, "frequency", key=key, path=chip.path)

    specs, couplings = {}, []
    for task in chip.tasks:
        system = task.recipe.get("system", {})
        if system.get("model") == "transmons" and subject in task.subject.split("-"):
            specs.update({t["name"]: t for t in system["transmon"]})
            a, b = task.subject.split("-")
            couplings.append((a, b, hz(system["coupling"][0]["strength"], "strength")))
    if not couplings:
        return None
    order = [subject] + sorted(set(specs) - {subject})
    transmons = [TransmonSpec(
        name=n, levels=int(specs[n]["levels"]),
        qubit_frequency_hz=hz(specs[n]["qubit_frequency"], "frequency"),
        anharmonicity_hz=hz(specs[n]["anharmonicity"], "anharmonicity"),
        spectrum=specs[n].get("spectrum", "duffing"),
        offset_charge=float(specs[n].get("offset_charge", 0.0))) for n in order]
    return coupled_transmons(transmons, couplings), order[1:]


def with_neighbours(chip: Chip, row, root: Path, *, virtual_z: bool = True) -> dict | None:
    """A single-qubit gate's exported file played on its qubit with the coupled
    neighbours present (rotating frame, the chip's levels, virtual Z on every qubit):
    the gate times the identity on the neighbours, averaged over all their computational
    states. None for a pair's gate, a qubit without neighbours, or a file whose chain
    (IF, line) this check does not replay."""
    from shaper.io.waveio import read_waveform
    from shaper.physics.simulation import simulate
    from shaper.physics.targets import gate

    if "-" in row.subject:
        return None
    found = neighbourhood(chip, row.subject)
    if found is None:
        return None
    system, neighbours = found
    wave = read_waveform(root / row.waveform)
    if wave.if_frequency_hz or wave.predistorted or wave.mixer_corrected:
        return None
    samples = np.zeros((wave.fractions.shape[0], system.controls.shape[0]))
    for name, column in zip(wave.column_names, wave.fractions.T, strict=True):
        channel = name.rsplit("_", 1)[0]
        samples[:, system.control_names.index(name)] = column * wave.full_scale_hz[channel]
    target = gate([row.gate] + ["I"] * len(neighbours))
    played = simulate(dressed(system), target, samples, 1 / wave.sample_rate_hz,
                      virtual_z=virtual_z)
    return {"infidelity": played.infidelity, "leakage": played.leakage,
            "neighbours": neighbours}


def dressed(system):
    """The system written in the eigenbasis of its drift (the dressed states, each named
    after the bare state it overlaps most), so that its computational states are the
    coupled qubits' own: a lab calibrates and reads out these, and their phases are the
    frames virtual Z tracks. What remains between them is the conditional phase (the
    static ZZ) and the drive's real effect on the neighbours.

    Raises:
        InputError: two bare states claim one dressed state (a resonance).
    """
    from shaper.errors import InputError
    from shaper.physics.systems import from_matrices

    _, vectors = np.linalg.eigh(system.drift)
    bare = np.argmax(np.abs(vectors) ** 2, axis=0)  # the bare state of each eigenvector
    if len(set(bare.tolist())) != len(bare):
        raise InputError("two bare states map to one dressed state (a resonance)")
    v = np.zeros_like(vectors)
    v[:, bare] = vectors
    v = v * np.exp(-1j * np.angle(np.diag(v)))[None, :]  # each real and positive on its own
    turn = lambda m: v.conj().T @ m @ v  # noqa: E731
    return from_matrices(turn(system.drift),
                         {n: turn(c) for n, c in zip(system.control_names, system.controls,
                                                     strict=True)},
                         dims=system.dims, computational=system.computational,
                         qubit_names=system.qubit_names)
