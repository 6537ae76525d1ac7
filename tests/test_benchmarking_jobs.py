"""Predicted RB of exported files (shaper.jobs.benchmarking, benchmarking_report, `shaper
benchmark`): a two-gate set on a 3-level transmon with T1/T2 checked against the figures
written out here (a 2-design of states, the README's Lindblad model built by hand, the
Clifford counts), the gate-set and chip tables and page carrying the numbers, the
command, and the two-qubit wiring with maps whose RB is known in closed form."""

from __future__ import annotations

import csv
import json
import tomllib
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import scipy.linalg
from helpers import run_cli

ALPHA_HZ = -250e6
T1_S, T2_S = 2e-6, 2e-6
RECIPE = f'''name = "tiny"
[system]
model = "transmon"
levels = 3
spectrum = "duffing"  # the ladder whose T1 model the idle below writes out
qubit_frequency = "5 GHz"
anharmonicity = "{ALPHA_HZ / 1e6:g} MHz"
t1 = "{T1_S * 1e6:g} us"
t2 = "{T2_S * 1e6:g} us"
[gate]
targets = ["X", "X/2"]
virtual_z = true
[pulse]
duration = "15 ns"
sample_rate = "2.4 GS/s"
max_rabi = "120 MHz"
[verdict]
lab_frame = "off"
extra_levels = 0
'''
SAMPLES = {"X": 36, "X/2": 30}  # X/2 shorter: padded to X's slot


def drag(recipe, label: str, n: int) -> np.ndarray:
    """A Gaussian of the rotation's area with first-order DRAG (Motzoi et al., Phys. Rev.
    Lett. 103, 110501 (2009)): good enough that T1/T2 dominates its error."""
    from shaper.signal.pulses import gaussian_shape, rotation_area

    s = np.zeros((n, 2))
    s[:, 0] = rotation_area(label) * gaussian_shape(n, recipe.dt)
    s[:, 1] = -np.gradient(s[:, 0], recipe.dt) / (2 * np.pi * ALPHA_HZ)
    return s


def write_files(folder: Path, recipe) -> dict[str, Path]:
    from shaper.io import writers
    from shaper.jobs.waveform import make_waveform
    from shaper.recipe.derive import for_gate

    paths = {}
    for label, n in SAMPLES.items():
        one = for_gate(recipe, label, samples=n)
        wave, _ = make_waveform(one, drag(one, label, n), one.export, one.sample_rate_hz)
        paths[label] = writers.write_waveform(folder, one.name, wave, one.system,
                                              recipe_name=one.name,
                                              recipe_sha256=one.sha256)[0]
    return paths


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """The set's files, their Playbacks and the prediction."""
    from shaper.io.waveio import read_waveform
    from shaper.jobs.benchmarking import predict_qubit
    from shaper.jobs.playback import Playback
    from shaper.recipe import load_recipe
    from shaper.recipe.derive import for_gate

    folder = tmp_path_factory.mktemp("set")
    (folder / "tiny.toml").write_text(RECIPE)
    recipe = load_recipe(folder / "tiny.toml")
    paths = write_files(folder, recipe)
    playbacks = {g: Playback(for_gate(recipe, g, samples=SAMPLES[g]), read_waveform(p))
                 for g, p in paths.items()}
    return SimpleNamespace(folder=folder, recipe=recipe, paths=paths, playbacks=playbacks,
                           block=predict_qubit(playbacks))


def superoperator(mapped: dict) -> np.ndarray:
    """Column stacking: vec(U rho U^dag) = (conj(U) kron U) vec(rho)."""
    if "unitary" in mapped:
        u = np.asarray(mapped["unitary"])
        return np.kron(u.conj(), u)
    return np.asarray(mapped["superoperator"])


def idle(seconds: float) -> np.ndarray:
    """The README's open Duffing transmon ("Decoherence") built here: drift alpha on level
    2 in the qubit's frame, L = a / sqrt(T1) and sqrt(2 / T_phi) n, exp of the Lindbladian
    (Lindblad, Commun. Math. Phys. 48, 119 (1976)) in column stacking."""
    d = 3
    h = 2 * np.pi * np.diag([0.0, 0.0, ALPHA_HZ])
    a = np.diag(np.sqrt(np.arange(1, d)), 1)
    t_phi = 1 / (1 / T2_S - 1 / (2 * T1_S))
    ops = [a / np.sqrt(T1_S), np.sqrt(2 / t_phi) * np.diag(np.arange(d, dtype=float))]
    eye = np.eye(d)
    gen = -1j * (np.kron(eye, h) - np.kron(h.T, eye))
    for op in ops:
        ld = op.conj().T @ op
        gen = gen + np.kron(op.conj(), op) - 0.5 * np.kron(eye, ld) - 0.5 * np.kron(ld.T, eye)
    return scipy.linalg.expm(gen * seconds)


def two_design_figures(s: np.ndarray, target: np.ndarray) -> tuple[float, float]:
    """Average gate infidelity over the six Pauli eigenstates, a state 2-design of a qubit
    (so the average is exact; Dankert et al., Phys. Rev. A 80, 012304 (2009), from memory),
    each prepared on levels 0/1 of 3; leakage 1 - Tr_c E(1_c / 2) (Wood and Gambetta,
    Phys. Rev. A 97, 032306 (2018))."""
    states = [np.array(v, complex) / np.linalg.norm(v) for v in
              ([1, 0], [0, 1], [1, 1], [1, -1], [1, 1j], [1, -1j])]
    fid = 0.0
    for psi in states:
        full = np.zeros(3, complex)
        full[:2] = psi
        out = (s @ np.outer(full, full.conj()).reshape(-1, order="F")).reshape(3, 3, order="F")
        want = np.zeros(3, complex)
        want[:2] = target @ psi
        fid += np.real(want.conj() @ out @ want) / 6
    mixed = np.diag([0.5, 0.5, 0]).astype(complex).reshape(-1, order="F")
    kept = np.real(np.trace((s @ mixed).reshape(3, 3, order="F")[:2, :2]))
    return 1 - fid, 1 - kept


IDEAL = {"X": np.array([[0, -1j], [-1j, 0]]),
         "X/2": np.array([[1, -1j], [-1j, 1]]) / np.sqrt(2)}


def test_predicted_epc_is_what_the_gates_maps_give(made):
    block, maps = made.block, {g: pb.gate_map for g, pb in made.playbacks.items()}
    slot = max(m["footprint_s"] for m in maps.values())
    assert block["slot"]["slot_s"] == pytest.approx(slot, rel=1e-12)
    # each gate's map, padded to the slot with the idle built here
    errors = {}
    for g, m in maps.items():
        s = idle(slot - m["footprint_s"]) @ superoperator(m)
        errors[g] = two_design_figures(s, IDEAL[g])
        assert block["gates"][g]["map_infidelity"] == pytest.approx(errors[g][0], rel=1e-6)
        assert block["gates"][g]["map_leakage"] == pytest.approx(errors[g][1], rel=1e-4,
                                                                 abs=1e-12)
    assert block["gates"]["X/2"]["padding_s"] > 0 and block["gates"]["X"]["padding_s"] == 0
    # one idle slot as built here
    assert block["slot"]["idle_infidelity"] == pytest.approx(
        two_design_figures(idle(slot), np.eye(2))[0], rel=1e-6)
    # of the 24 Cliffords (they send z to one of 6 axes, 4 each) 4 keep z (frame updates
    # only), 4 flip it (one X) and 16 put it on the equator (one X/2): with virtual Z the
    # fewest pulses are 20 / 24 per Clifford, each Clifford's error that of its one pulse
    assert block["compilation"]["mean_physical_per_clifford"] == pytest.approx(20 / 24)
    mean = (4 * errors["X"][0] + 16 * errors["X/2"][0]) / 24
    assert block["gate_independent"]["mean_clifford_infidelity"] == pytest.approx(mean,
                                                                                  rel=1e-6)
    # Magesan, Gambetta and Emerson, Phys. Rev. Lett. 106, 180504 (2011): for gate-
    # independent noise the EPC is the Clifford-averaged infidelity; here T1/T2 dominates
    # (the gates' own coherent errors differ), and the statement holds to 2 %
    assert block["error_per_clifford"] == pytest.approx(mean, rel=0.02)
    # Wood and Gambetta (2018): the leakage rate per Clifford is the Cliffords' mean leakage
    leak = (4 * errors["X"][1] + 16 * errors["X/2"][1]) / 24
    assert block["leakage_per_clifford"] == pytest.approx(leak, rel=0.05)


def test_the_sampled_cross_check_and_the_interleaved_bounds(made):
    block = made.block
    check = block["cross_check"]
    assert check["length"] in block["rb"]["lengths"] and check["sequences"] == 200
    assert abs(check["sampled"] - check["exact"]) <= 3 * check["standard_error"]
    assert check["agree"]
    for gate, inter in block["interleaved"].items():
        # Magesan et al., Phys. Rev. Lett. 109, 080505 (2012): the gate's error lies in
        # r_C +- E; its map's infidelity is that error
        assert inter["gate_infidelity"] == pytest.approx(block["gates"][gate]["map_infidelity"])
        assert abs(inter["gate_error"] - inter["gate_infidelity"]) <= inter["bound"]
        assert inter["judged_infidelity"] == block["gates"][gate]["judged_infidelity"]
    json.dumps(block)  # JSON-ready


def test_gate_set_and_chip_tables_carry_the_prediction(made, tmp_path):
    from shaper.jobs.benchmarking_report import gate_set_block, qubit_unit, write_block
    from shaper.jobs.chip import write_summary
    from shaper.jobs.gateset import GateRow, write_table
    from shaper.recipe.chip import load_chip

    def rows(subject=""):
        return [GateRow(gate=g, derived_from="", phase_deg=0.0, duration_s=n / 2.4e9,
                        samples=n, infidelity=1e-3, leakage=1e-5, met=True,
                        waveform=made.paths[g].name, subject=subject)
                for g, n in SAMPLES.items()]
    said = []
    gate_rows = rows()
    block = gate_set_block(made.recipe, gate_rows, made.folder, echo=said.append)
    write_table(tmp_path, "gateset", gate_rows)
    files = write_block(tmp_path, block, "gateset.md")
    epc = made.block["error_per_clifford"]
    table = {r["gate"]: r for r in
             csv.DictReader((tmp_path / "gateset.csv").read_text().splitlines())}
    assert float(table["X"]["predicted_epc"]) == pytest.approx(epc, rel=1e-5)
    for g in SAMPLES:
        assert float(table[g]["interleaved_error"]) == pytest.approx(
            made.block["interleaved"][g]["gate_error"], rel=1e-5)
        assert float(table[g]["interleaved_bound"]) > 0
    assert "## Predicted randomized benchmarking" in (tmp_path / "gateset.md").read_text()
    assert {p.name for p in files} == {"benchmarking.json", "benchmarking-q0.png"}
    assert "q0: predicted error per Clifford" in said[0]
    # a one-qubit chip with the same qubit: chip.csv, chip.md and the page
    chip_file = tmp_path / "chip.toml"
    chip_file.write_text(CHIP)
    root = tmp_path / "chip"
    root.mkdir()
    for p in made.paths.values():
        for suffix in (".csv", ".json"):
            (root / p.with_suffix(suffix).name).write_bytes(p.with_suffix(suffix).read_bytes())
    chip_rows = rows("q0")
    chip = load_chip(chip_file)
    # what the chip's executor runs as a unit once q0's gates are made, then the summary
    block = {"qubits": {"q0": qubit_unit(chip, "q0", chip_rows, root, echo=said.append)},
             "pairs": {}}
    write_summary(chip, root, chip_rows, benchmarking=block)
    # (a chip's single-qubit recipes leave virtual Z off unless made beside neighbours:
    # another prediction than the set's, the same in every place it is written)
    chip_epc = json.loads((root / "benchmarking.json").read_text())["qubits"]["q0"][
        "error_per_clifford"]
    table = list(csv.DictReader((root / "chip.csv").read_text().splitlines()))
    assert all(float(r["predicted_epc"]) == pytest.approx(chip_epc, rel=1e-5) for r in table)
    page = (root / "chip.html").read_text()
    assert '<table id="benchmarking">' in page and '<table id="interleaved">' in page
    assert f"{chip_epc:.3e}" in page and "predicted RB: error per Clifford" in page
    assert "benchmarking-q0.png" in page  # the decay plot, embedded
    assert "## Predicted randomized benchmarking" in (root / "chip.md").read_text()


# the tiny set's qubit as a chip: the same system (its template leaves the lab frame off)
CHIP = f'''name = "tiny-chip"
[gates]
single = ["X", "X/2"]
single_durations = "15ns"
[template.pulse]
sample_rate = "2.4 GS/s"
[template.verdict]
lab_frame = "off"
extra_levels = 0
[[qubit]]
name = "q0"
frequency = "5 GHz"
anharmonicity = "{ALPHA_HZ / 1e6:g} MHz"
max_rabi = "120 MHz"
levels = 3
spectrum = "duffing"
t1 = "{T1_S * 1e6:g} us"
t2 = "{T2_S * 1e6:g} us"
'''


def test_the_command_prints_the_prediction(made, tmp_path):
    folder = made.folder
    code, out, err = run_cli("benchmark", folder / "tiny.toml", made.paths["X"],
                             f"X/2={made.paths['X/2']}", "--json", "--plot",
                             tmp_path / "rb.png")
    data = json.loads(out)
    met = [pb.verdict().met for pb in made.playbacks.values()]
    assert code == (0 if all(met) else 1), err
    assert [data["targets"][g]["met"] for g in made.playbacks] == met
    assert data["benchmarking"]["error_per_clifford"] == pytest.approx(
        made.block["error_per_clifford"], rel=1e-9)
    assert (tmp_path / "rb.png").stat().st_size > 10_000
    code, out, err = run_cli("benchmark", folder / "tiny.toml", folder / "tiny.toml")
    assert code == 2 and "GATE=FILE" in err


class Stub:
    """A Playback's face for the two-qubit wiring: a given map; reading it is recorded."""

    def __init__(self, mapped: dict, system, log: list, slices: int = 100):
        self._mapped, self.log = mapped, log
        played = SimpleNamespace(shape=(slices,))  # what the chain's slices would be
        self.faithful = SimpleNamespace(recipe=SimpleNamespace(system=system), samples=None,
                                        chain=SimpleNamespace(finer=lambda k: lambda s: played))

    @property
    def gate_map(self) -> dict:
        self.log.append("map")
        return self._mapped

    def trusted(self):
        return 0.0, 0.0, "given"


def test_two_qubit_rb_of_a_depolarising_pair_gate(tmp_path):
    from shaper.errors import InputError
    from shaper.jobs.benchmarking import predict_pair
    from shaper.recipe import load_recipe

    system = load_recipe(tomllib.loads(RECIPE.replace('t1 = "2 us"\nt2 = "2 us"\n', ""))
                         ).system
    x2 = np.eye(3, dtype=complex)
    x2[:2, :2] = IDEAL["X/2"]
    faces = dict(levels=[3], computational=[0, 1], footprint_s=10e-9, phase_rad=None,
                 frame_before_rad=[0.0], frame_after_rad=[0.0])
    log: list = []
    qubit = {"X/2": Stub({"unitary": x2, **faces}, system, log)}
    cz = np.eye(9, dtype=complex)
    cz[4, 4] = -1
    projector = np.diag([1.0 if i in (0, 1, 3, 4) else 0.0 for i in range(9)])

    def pair(strength, slices=100):
        s = (1 - strength) * np.kron(cz.conj(), cz) + strength * np.outer(
            (projector / 4).reshape(-1), np.eye(9).reshape(-1))
        return Stub({"superoperator": s, "levels": [3, 3], "computational": [0, 1, 3, 4],
                     "footprint_s": 40e-9, "phase_rad": None, "frame_before_rad": [0, 0],
                     "frame_after_rad": [0, 0]},
                    SimpleNamespace(dims=(3, 3), dimension=9, collapse=(1,)), log, slices)
    said = []
    ideal = predict_pair("CZ", pair(0.0), (qubit, qubit), sequences=10,
                         echo=lambda text: said.append((text, len(log))))
    assert said[0][1] == 0 and "map applications" in said[0][0]  # said before any map
    assert ideal["error_per_clifford"] == pytest.approx(0, abs=1e-12)
    # a depolarising pair gate of strength s: a sequence survives undisturbed with
    # probability (1 - s)^k over its k pair gates, else it sits at 1/4; the classes of
    # 0, 1, 2, 3 CZs hold 576, 5184, 5184, 576 of the 11,520 Cliffords (Barends et al.,
    # Nature 508, 500 (2014), supplement), so p = E[(1 - s)^k] (Magesan et al. 2011)
    strength = 0.02
    p = (576 + 5184 * (1 - strength) + 5184 * (1 - strength) ** 2
         + 576 * (1 - strength) ** 3) / 11520
    noisy = predict_pair("CZ", pair(strength), (qubit, qubit), sequences=60, echo=said.append)
    fit = noisy["rb"]["fit"]
    assert fit["p"] == pytest.approx(p, abs=4 * fit["p_error"] + 1e-3)
    assert noisy["compilation"]["mean_pair_gates_per_clifford"] == pytest.approx(1.5)
    # a map that would not fit in this machine is refused before it is built
    with pytest.raises(InputError, match="needs about .* GB"):
        predict_pair("CZ", pair(0.0, slices=10 ** 12), (qubit, qubit), echo=said.append)


def test_a_gate_sets_prediction_plot_is_drawn_before_the_command_ends(tmp_path):
    # the set's decay plot is queued on the run's plot helper after its gates; the helper
    # was closed with it still queued, so the plot was dropped (and its process killed,
    # leaking its semaphores). Now it is drawn.
    from helpers import with_keys

    text = (Path(__file__).resolve().parents[1] / "recipes" / "xy-set.toml").read_text()
    text = with_keys(text, "verdict", {"lab_frame": "off", "extra_levels": 0})
    recipe = tmp_path / "set.toml"
    recipe.write_text(text)
    code, out, err = run_cli("optimize", recipe, "--out", tmp_path / "run")
    assert code == 0, out + err
    assert (tmp_path / "run" / "benchmarking-q0.png").stat().st_size > 1000
    assert "leaked" not in err and "not written" not in out
