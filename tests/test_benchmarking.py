"""Predicted randomized benchmarking (shaper.physics.clifford, clifford_pairs, gate_maps,
rb_fit, benchmarking, interleaved, benchmarking_pairs), each check against a reference
from outside the project: closed forms, published counts, brute-force enumeration, and
matrices built here with scipy."""

import itertools
import json

import numpy as np
import pytest
import scipy.linalg
from helpers import duffing, pedersen_fidelity

from shaper.errors import InputError
from shaper.physics.benchmarking import clifford_maps, predict_rb
from shaper.physics.benchmarking_pairs import PairPlayer, estimate_pair_cost, predict_pair_rb
from shaper.physics.clifford import (
    compile_cliffords,
    single_qubit_cliffords,
)
from shaper.physics.clifford_pairs import pair_cliffords, pair_gate_unitary
from shaper.physics.gate_maps import channel_figures, frame_unitary, qubit_maps
from shaper.physics.interleaved import interleaved_bound, predict_interleaved

FULL = ["X", "Y", "X/2", "-X/2", "Y/2", "-Y/2"]
SIGMA = {"x": np.array([[0, 1], [1, 0]], complex), "y": np.array([[0, -1j], [1j, 0]]),
         "z": np.diag([1, -1]).astype(complex)}


def rot(name, over=0.0, levels=2):
    """exp(-i theta sigma / 2) built here with scipy (Nielsen and Chuang, ch. 4), X-type
    angles scaled by (1 + over), embedded on ``levels`` with level 2+ untouched."""
    axis, angle = {"X": ("x", np.pi), "Y": ("y", np.pi), "X/2": ("x", np.pi / 2),
                   "Y/2": ("y", np.pi / 2), "-X/2": ("x", -np.pi / 2),
                   "-Y/2": ("y", -np.pi / 2)}[name]
    if axis == "x":
        angle *= 1 + over
    u = np.eye(levels, dtype=complex)
    u[:2, :2] = scipy.linalg.expm(-0.5j * angle * SIGMA[axis])
    return u


def sup(u):
    return np.kron(u.conj(), u)  # column stacking: vec(U X U^dag) = (conj U kron U) vec X


def depolarising(lam, d):
    """rho -> lam rho + (1 - lam) Tr(rho) 1/d (Nielsen, Phys. Lett. A 303, 249 (2002))."""
    one = np.eye(d).reshape(-1)
    return lam * np.eye(d * d) + (1 - lam) * np.outer(one, one) / d


def play(seq, over=0.0):
    """The 2 x 2 unitary of a compiled sequence, built here: rotations by scipy, virtual Z
    as exp(-i theta sigma_z / 2), an idle slot as the identity."""
    z = {"Z/2": np.pi / 2, "Z": np.pi, "-Z/2": -np.pi / 2}
    u = np.eye(2, dtype=complex)
    for op in seq:
        step = (scipy.linalg.expm(-0.5j * z[op] * SIGMA["z"]) if op in z
                else np.eye(2) if op == "I" else rot(op, over))
        u = step @ u
    return u


def same_up_to_phase(a, b):
    return abs(abs(np.trace(a.conj().T @ b)) - len(a)) < 1e-9


# ---- the single-qubit group and its compilations ---------------------------------------

def test_single_qubit_group_has_24_elements_and_a_latin_product_table():
    # the single-qubit Clifford group modulo phase has 24 elements (the rotation group of
    # the octahedron; Nielsen and Chuang, ch. 10, common practice)
    g = single_qubit_cliffords()
    assert len(g.unitaries) == 24
    assert all(sorted(row) == list(range(24)) for row in g.product)
    assert all(g.product[i, g.inverse[i]] == 0 for i in range(24))


@pytest.mark.parametrize("gates, virtual_z, method", [
    (FULL, True, "shortest"), (FULL, False, "shortest"), (["X/2"], True, "shortest"),
    (["X/2", "Y/2"], False, "shortest"), (FULL, False, "table"), (FULL, True, "table")])
def test_every_compiled_sequence_plays_its_clifford(gates, virtual_z, method):
    # the ideal product of each compiled sequence (rotations built here with scipy; virtual
    # Z as exp(-i theta sigma_z / 2)) is the Clifford it stands for
    comp = compile_cliffords(gates, virtual_z=virtual_z, method=method)
    for c, seq in enumerate(comp.sequences):
        assert same_up_to_phase(play(seq), single_qubit_cliffords().unitaries[c]), (c, seq)


def test_the_table_reproduces_the_published_averages():
    # Epstein et al., Phys. Rev. A 89, 062321 (2014): 1.875 gates per Clifford with every
    # entry played (identity as an idle slot, Z as Y then X); 1.75 physical pulses with Z
    # virtual (CONVENTIONS section 10, counted by an independent script)
    played = compile_cliffords(FULL, virtual_z=False, method="table")
    assert played.mean_slots == pytest.approx(1.875, abs=1e-15)
    virtual = compile_cliffords(FULL, virtual_z=True, method="table")
    assert virtual.mean_physical == pytest.approx(1.75, abs=1e-15)
    assert len(set(played.sequences)) == 24


def test_shortest_compilations_count_as_derived_by_hand():
    # derived here: with virtual Z free, the 4 Z rotations need no pulse, the 16 Cliffords
    # that move z to the equator one quarter turn, the 4 that flip z one pi pulse (or two
    # quarter turns with X/2 alone; McKay et al., Phys. Rev. A 96, 022330 (2017))
    assert compile_cliffords(FULL).mean_physical == pytest.approx(20 / 24, abs=1e-15)
    x_half = compile_cliffords(["X/2"])
    assert x_half.mean_physical == pytest.approx((16 + 2 * 4) / 24, abs=1e-15)
    assert sorted(x_half.physical_counts.tolist()) == [0] * 4 + [1] * 16 + [2] * 4


def test_a_gate_set_that_cannot_make_every_clifford_is_refused_by_name():
    with pytest.raises(InputError, match=r"only 8 of the 24.*add one of X/2, Y/2, -X/2"):
        compile_cliffords(["X", "Y"])
    with pytest.raises(InputError, match=r"without virtual Z.*Y/2.*or allow virtual Z"):
        compile_cliffords(["X/2"], virtual_z=False)
    with pytest.raises(InputError, match=r"lacks Y, -Y/2"):
        compile_cliffords(["X", "X/2", "-X/2", "Y/2"], method="table")
    with pytest.raises(InputError, match=r"unknown single-qubit gate 'H'"):
        compile_cliffords(["X/2", "H"])


# ---- maps and the frame --------------------------------------------------------------

def test_virtual_z_is_a_phase_n_theta_on_every_level():
    # README "Gate sets" / McKay et al. (2017): shifting a drive's phase by phi turns its
    # propagator U into Z(phi) U Z(phi)^dag with Z(phi) = exp(i phi N); checked on a
    # 3-level Duffing transmon (Koch et al. 2007) built by hand, scipy's expm
    drift, (op_i, op_q) = duffing(3, 1e6, -220e6)
    phi, rabi, dt = 0.7, 31.25e6, 16e-9
    u0 = scipy.linalg.expm(-2j * np.pi * dt * (drift + rabi * op_i))
    shifted = rabi * (np.cos(phi) * op_i + np.sin(phi) * op_q)
    u_phi = scipy.linalg.expm(-2j * np.pi * dt * (drift + shifted))
    z = frame_unitary(phi, 3)
    np.testing.assert_allclose(z, scipy.linalg.expm(1j * phi * np.diag([0, 1, 2])),
                               atol=1e-15)
    np.testing.assert_allclose(z @ u0 @ z.conj().T, u_phi, atol=1e-12)


def test_channel_figures_match_pedersen_for_a_unitary():
    # Pedersen, Moller, Molmer, Phys. Lett. A 367, 47 (2007), written out in tests/helpers
    u = rot("X/2", over=0.03, levels=3) @ scipy.linalg.expm(
        -0.05j * np.array([[0, 0, 0], [0, 0, 1], [0, 1, 0]]))
    infidelity, leak = channel_figures(sup(u), rot("X/2"), (3,))
    assert infidelity == pytest.approx(1 - pedersen_fidelity(u[:2, :2], rot("X/2")),
                                       abs=1e-14)
    assert leak == pytest.approx(1 - np.sum(np.abs(u[:2, :2]) ** 2) / 2, abs=1e-14)


def test_bad_maps_are_refused():
    with pytest.raises(InputError, match="not unitary"):
        qubit_maps({"X": np.ones((2, 2))})
    with pytest.raises(InputError, match="does not preserve the trace"):
        qubit_maps({"X": 0.9 * np.eye(4)})
    with pytest.raises(InputError, match=r"must be a 3x3 unitary or a 9x9"):
        qubit_maps({"X": np.eye(4)}, levels=3)
    with pytest.raises(InputError, match="unknown physical gate 'Z'"):
        qubit_maps({"Z": np.eye(2)})
    with pytest.raises(InputError, match="levels must be an integer >= 2"):
        qubit_maps({"X": np.eye(1)}, levels=1)


# ---- single-qubit RB -----------------------------------------------------------------

def test_ideal_gates_give_zero_error_on_two_and_three_levels():
    # Magesan, Gambetta, Emerson, PRL 106, 180504 (2011): perfect gates do not decay. On
    # three levels a phase on level 2 (no population there) changes nothing.
    for levels in (2, 3):
        maps = {g: rot(g, levels=levels) @ np.diag(np.exp(0.3j * (np.arange(levels) > 1)))
                for g in FULL}
        bench = predict_rb(qubit_maps(maps, levels=levels))
        assert abs(bench.error_per_clifford) < 1e-12
        assert bench.leakage is None


def test_exact_average_equals_brute_force_enumeration():
    # the transfer operator against the plain average over all 24^m sequences (m = 1, 2),
    # each played here by composing its Cliffords' maps and the recovery
    rng = np.random.default_rng(3)
    maps = qubit_maps({g: depolarising(0.99, 3) @ sup(rot(g, over=0.05, levels=3)
                                                       @ random_unitary(rng, 3, 0.05))
                       for g in ["X/2", "Y/2"]}, levels=3)
    comp = compile_cliffords(maps.gates)
    cmaps, group = clifford_maps(maps, comp), single_qubit_cliffords()
    bench = predict_rb(maps, compilation=comp, lengths=(1, 2, 3))
    start = np.zeros(9)
    start[0] = 1
    for m in (1, 2):
        total = 0.0
        for seq in itertools.product(range(24), repeat=m):
            state, g = start.astype(complex), 0
            for c in seq:
                state, g = cmaps[c] @ state, group.product[c, g]
            total += (cmaps[group.inverse[g]] @ state)[0].real
        assert bench.survival[m - 1] == pytest.approx(total / 24 ** m, abs=1e-13)


def random_unitary(rng, d, scale):
    a = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    return scipy.linalg.expm(-1j * scale * (a + a.conj().T) / 2)


@pytest.mark.parametrize("gates", [FULL, ["X/2"]])
def test_depolarising_gates_give_the_analytic_error_per_clifford(gates):
    # each physical gate followed by a depolarising channel of parameter lam; depolarising
    # commutes with unitaries, so a Clifford of n pulses depolarises by lam^n and the
    # sequence's decay per Clifford is p = mean_c lam^(n_c) (derived here); the error per
    # Clifford is r = (d - 1)(1 - p)/d (Magesan et al. 2011; the depolarising-channel
    # relation of Nielsen, Phys. Lett. A 303, 249 (2002))
    lam = 0.998
    maps = qubit_maps({g: depolarising(lam, 2) @ sup(rot(g)) for g in gates})
    comp = compile_cliffords(gates)
    expected = (1 - np.mean(lam ** comp.physical_counts)) / 2
    bench = predict_rb(maps)
    # the exact decay is not one exponential: the group's other irreducible parts decay
    # as O(1 - lam)^m; measured 1.2e-7 relative
    assert bench.error_per_clifford == pytest.approx(expected, rel=1e-5)
    assert bench.fit.offset == pytest.approx(0.5, abs=1e-6)


def test_over_rotation_gives_the_clifford_averaged_infidelity():
    # Magesan, Gambetta, Emerson (2011): for gate-independent noise r equals the average
    # gate infidelity averaged over the Cliffords. Here the error (a 3 % over-rotation of
    # every X-type pulse) depends on the gate, so the statement holds only to first order
    # in the spread of the Cliffords' errors (Magesan, Gambetta, Emerson, Phys. Rev. A 85,
    # 042311 (2012)); tolerance 10 % (measured: 5 % with the full set, 0.1 % with X/2).
    for gates in (FULL, ["X/2"]):
        maps = qubit_maps({g: rot(g, over=0.03) for g in gates})
        comp = compile_cliffords(gates)
        group = single_qubit_cliffords()
        mean_infidelity = np.mean([1 - pedersen_fidelity(play(seq, over=0.03),
                                                         group.unitaries[c])
                                   for c, seq in enumerate(comp.sequences)])
        bench = predict_rb(maps, compilation=comp)
        assert bench.error_per_clifford == pytest.approx(mean_infidelity, rel=0.10)


def test_sampled_sequences_agree_with_the_exact_average():
    # same maps (3 levels: leakage, an over-rotation, depolarising), 200 seeded sequences
    # per length: every length's mean within 4 standard errors of the exact average, and
    # the fitted p within 4 of its standard errors (plain statistics, no source needed)
    rng = np.random.default_rng(5)
    maps = qubit_maps({g: depolarising(0.995, 3) @ sup(rot(g, over=0.04, levels=3)
                                                        @ random_unitary(rng, 3, 0.02))
                       for g in FULL}, levels=3)
    lengths = (1, 2, 4, 8, 16, 32, 64, 128)
    exact = predict_rb(maps, lengths=lengths)
    sampled = predict_rb(maps, lengths=lengths, method="sampled", sequences=200, seed=11)
    again = predict_rb(maps, lengths=lengths, method="sampled", sequences=200, seed=11)
    assert sampled.survival == again.survival  # seeded: reproducible
    err = np.array(sampled.survival_error)
    assert np.all(np.abs(np.array(sampled.survival) - exact.survival) < 4 * err)
    assert abs(sampled.fit.decay - exact.fit.decay) < 4 * sampled.fit.decay_error
    print(f"exact r = {exact.error_per_clifford:.4e}, sampled r = "
          f"{sampled.error_per_clifford:.4e} +- {sampled.error_per_clifford_error:.1e}")


# ---- leakage ---------------------------------------------------------------------------

def test_depolarising_on_three_levels_moves_the_offset_to_one_third():
    # derived here: a 3-level depolarising channel lam (Nielsen 2002) commutes with every
    # gate, so after the sequence the state is Lam |0><0| + (1 - Lam) 1/3, Lam the product
    # of lam^(n_c): survival 1/3 + 2/3 Lam, subspace 2/3 + Lam/3, decay p = mean lam^(n_c).
    # Wood and Gambetta, PRA 97, 032306 (2018): leakage L1 = 1 - Tr[P1 E(P1/2)] = (1 - p)/3,
    # seepage L2 = 1 - Tr[P2 E(P2)] = 2 (1 - p)/3 (a unital map: d1 L1 = d2 L2), the leaked
    # population's steady state L1/(L1 + L2) = 1/3 and the offset (1 - 1/3)/2 = 1/3.
    lam = 0.99
    maps = qubit_maps({g: depolarising(lam, 3) @ sup(rot(g, levels=3)) for g in FULL},
                      levels=3)
    p = np.mean(lam ** compile_cliffords(FULL).physical_counts)
    bench = predict_rb(maps)
    assert bench.fit.offset == pytest.approx(1 / 3, abs=1e-6)
    assert bench.fit.decay == pytest.approx(p, rel=1e-6)
    assert bench.subspace_fit.decay == pytest.approx(p, rel=1e-6)
    assert bench.leakage.leakage_rate == pytest.approx((1 - p) / 3, rel=1e-4)
    assert bench.leakage.seepage_rate == pytest.approx(2 * (1 - p) / 3, rel=1e-4)
    assert bench.leakage.steady_state_leaked == pytest.approx(1 / 3, rel=1e-4)
    # without the third level the offset is 1/2 (Magesan et al. 2011, d = 2)
    two = predict_rb(qubit_maps({g: depolarising(lam, 2) @ sup(rot(g)) for g in FULL}))
    assert two.fit.offset == pytest.approx(0.5, abs=1e-6)


def amplitude_damping_2_to_1(gamma):
    """Kraus operators of the decay |2> -> |1> with probability gamma (Nielsen and Chuang,
    ch. 8), as a column-stacked superoperator sum_k conj(K) kron K."""
    k0 = np.diag([1, 1, np.sqrt(1 - gamma)]).astype(complex)
    k1 = np.zeros((3, 3), complex)
    k1[1, 2] = np.sqrt(gamma)
    return sup(k0) + sup(k1)


def test_leakage_and_seepage_rates_follow_wood_and_gambetta():
    # X-type pulses rotate |1> slightly into |2>, which decays back (seepage): Wood and
    # Gambetta (2018) define L1 = 1 - Tr[P1 E(P1/2)] and L2 = 1 - Tr[P2 E(P2)] of the
    # Clifford-averaged map E (computed here from the averaged maps); the leaked population
    # approaches L1 / (L1 + L2). Tolerance 5 %: the noise depends on the Clifford (measured
    # 1 % for these maps).
    leak = scipy.linalg.expm(-0.025j * np.array([[0, 0, 0], [0, 0, 1], [0, 1, 0]]))
    maps = qubit_maps({g: amplitude_damping_2_to_1(0.05) @ sup(
        (leak if g in ("X", "X/2", "-X/2") else np.eye(3)) @ rot(g, levels=3))
        for g in FULL}, levels=3)
    average = clifford_maps(maps, compile_cliffords(FULL)).mean(axis=0)
    p1, p2 = np.diag([1.0, 1, 0]), np.diag([0.0, 0, 1])
    out1 = (average @ (p1 / 2).T.reshape(-1)).reshape(3, 3).T
    out2 = (average @ p2.T.reshape(-1)).reshape(3, 3).T
    l1, l2 = 1 - np.trace(p1 @ out1).real, 1 - np.trace(p2 @ out2).real
    bench = predict_rb(maps, lengths=(1, 2, 4, 8, 16, 32, 64, 128, 256, 512))
    assert bench.leakage.leakage_rate == pytest.approx(l1, rel=0.05)
    assert bench.leakage.seepage_rate == pytest.approx(l2, rel=0.05)
    assert bench.leakage.steady_state_leaked == pytest.approx(l1 / (l1 + l2), rel=0.05)
    assert bench.leaked[-1] == pytest.approx(l1 / (l1 + l2), rel=0.05)
    assert bench.figures()["leakage"]["steady_state_leaked"] > 1e-3


# ---- interleaved RB --------------------------------------------------------------------

def test_interleaved_rb_recovers_a_depolarised_gate():
    # X/2 carries an extra depolarising lam_g on top of every gate's lam: its average gate
    # infidelity is (1 - lam lam_g)/2 (Nielsen 2002), and with noise that commutes with the
    # gates p_C / p = lam lam_g exactly (Magesan et al., PRL 109, 080505 (2012))
    lam, lam_g = 0.999, 0.996
    maps = qubit_maps({g: depolarising(lam * (lam_g if g == "X/2" else 1), 2) @ sup(rot(g))
                       for g in FULL})
    result = predict_interleaved(maps, "X/2")
    truth = (1 - lam * lam_g) / 2
    assert result.gate_infidelity == pytest.approx(truth, rel=1e-12)
    assert result.gate_error == pytest.approx(truth, rel=1e-4)
    assert abs(result.gate_error - truth) <= result.bound
    json.dumps(result.figures())


def test_interleaved_rb_of_an_over_rotated_gate_lies_within_the_bound():
    # a coherent 4 % over-rotation of X/2 only, the rest depolarised: the gate's infidelity
    # (Pedersen et al. 2007, of the map as given) lies within r_C +- E, E the bound of
    # Magesan et al. (2012), Eq. (5), written in interleaved.py from memory
    maps = qubit_maps({g: depolarising(0.999, 2) @ sup(rot(g, over=0.04 if g == "X/2" else 0))
                       for g in FULL})
    result = predict_interleaved(maps, "X/2")
    truth = 1 - pedersen_fidelity(rot("X/2", over=0.04), rot("X/2"))
    lam_part = 0.5 * (1 - 0.999)  # the depolarising part's infidelity, also in the map
    assert result.gate_infidelity > truth
    assert abs(result.gate_error - result.gate_infidelity) <= result.bound
    assert result.gate_infidelity == pytest.approx(truth + lam_part, rel=0.01)


def test_interleaved_bound_formula():
    # Magesan et al. (2012), Eq. (5), evaluated by hand: p = 0.99, p_C = 0.98
    p, pc = 0.99, 0.98
    first = (abs(p - pc / p) + (1 - p)) / 2
    second = 2 * 3 * (1 - p) / (p * 4) + 4 * np.sqrt(1 - p) * np.sqrt(3) / p
    assert interleaved_bound(p, pc) == pytest.approx(min(first, second), rel=1e-14)


def test_bad_runs_are_refused():
    maps = qubit_maps({g: rot(g) for g in FULL})
    with pytest.raises(InputError, match="at least 3 different sequence lengths"):
        predict_rb(maps, lengths=(1, 2))
    with pytest.raises(InputError, match="method must be 'exact' or 'sampled'"):
        predict_rb(maps, method="twirl")
    with pytest.raises(InputError, match="at least 2 sequences"):
        predict_rb(maps, method="sampled", sequences=1)
    with pytest.raises(InputError, match="'Z' is not one of"):
        predict_interleaved(maps, "Z")
    with pytest.raises(InputError, match="lack"):
        predict_rb(qubit_maps({"X/2": rot("X/2")}),
                   compilation=compile_cliffords(FULL))


# ---- two qubits ------------------------------------------------------------------------

def test_two_qubit_group_has_11520_elements_and_is_closed():
    # |C2| = 11,520 modulo phase (Barends et al., Nature 508, 500 (2014), supplement;
    # Corcoles et al., PRA 87, 030301 (2013)); products of random elements stay inside
    comp = compile_cliffords(FULL)
    for name in ("CZ", "CNOT", "iSWAP"):
        group = pair_cliffords(name, (comp, comp))
        assert len(group.unitaries) == len(group.index) == 11520
        counts = group.counts()
        # the usual compilation averages 1.5 pair gates (from memory; CONVENTIONS s. 10):
        # 576 x 0 + 5184 x 1 + 5184 x 2 + 576 x 3 over 11520
        assert counts["class_sizes"] == [576, 5184, 5184, 576]
        assert counts["mean_pair_gates_per_clifford"] == 1.5
        print(name, counts)
    rng = np.random.default_rng(0)
    a, b = rng.integers(0, 11520, size=(2, 200))
    group.find(group.unitaries[a] @ group.unitaries[b])  # KeyError if outside


def test_local_layers_match_the_tensor_product():
    # both qubits' maps applied at once equal kron(U_a, U_b) rho kron(U_a, U_b)^dag, built
    # here with numpy (q0 most significant, README "Conventions"), on 3 x 2 levels
    rng = np.random.default_rng(1)
    comp = compile_cliffords(FULL)
    ua = {g: rot(g, levels=3) @ random_unitary(rng, 3, 0.1) for g in FULL}
    ub = {g: rot(g) @ random_unitary(rng, 2, 0.1) for g in FULL}
    cl = pair_cliffords("CZ", (comp, comp))
    player = PairPlayer(cl, (qubit_maps(ua, levels=3), qubit_maps(ub)), np.eye(36))
    layer = 5 * 24 + 17
    a, b = divmod(layer, 24)
    slots = cl.layer_slots[layer]

    def played(units, seq, levels):  # virtual Z: diag(e^{i n theta}), built here
        z = {"Z/2": np.pi / 2, "Z": np.pi, "-Z/2": -np.pi / 2}
        u = np.eye(levels, dtype=complex)
        for op in seq:
            step = np.diag(np.exp(1j * z[op] * np.arange(levels))) if op in z else units[op]
            u = step @ u
        return u

    assert comp.slot_counts[a] <= slots and comp.slot_counts[b] <= slots
    u = np.kron(played(ua, comp.sequences[a], 3), played(ub, comp.sequences[b], 2))
    rho = random_unitary(rng, 6, 1.0)[:, :1] @ random_unitary(rng, 6, 1.0)[:1, :]
    rho = rho @ rho.conj().T
    out = player.local(rho[None], np.array([layer]))[0]
    np.testing.assert_allclose(out, u @ rho @ u.conj().T, atol=1e-13)


@pytest.mark.parametrize("name", ["CZ", "CNOT", "iSWAP"])
def test_ideal_two_qubit_gates_give_zero_error(name):
    # Magesan et al. (2011): perfect gates do not decay; the recovery undoes every sequence
    maps = qubit_maps({g: rot(g) for g in FULL})
    bench = predict_pair_rb(name, pair_gate_unitary(name)[1], (maps, maps),
                            lengths=(1, 2, 4, 8), sequences=4)
    assert min(bench.survival) > 1 - 1e-12
    assert abs(bench.error_per_clifford) < 1e-12


def test_depolarised_pair_gate_gives_the_analytic_error_per_clifford():
    # depolarising (d = 4, Nielsen 2002) after the pair gate only: a Clifford with k pair
    # gates depolarises by lam^k, so p = mean lam^k = (576 + 5184 lam + 5184 lam^2 +
    # 576 lam^3) / 11520 (the compilation's classes) and r = 3 (1 - p)/4 (Magesan et al.
    # 2011); sampled, so within 4 standard errors
    lam = 0.99
    maps = qubit_maps({g: rot(g) for g in FULL})
    cz = pair_gate_unitary("CZ")[1]
    bench = predict_pair_rb("CZ", depolarising(lam, 4) @ sup(cz), (maps, maps),
                            lengths=(1, 2, 4, 8, 16, 32, 64), sequences=40, seed=2)
    p = (576 + 5184 * lam + 5184 * lam ** 2 + 576 * lam ** 3) / 11520
    assert abs(bench.error_per_clifford - 3 * (1 - p) / 4) < 4 * bench.error_per_clifford_error
    assert bench.compilation["mean_pair_gates_per_clifford"] == 1.5
    assert bench.cost["estimated_seconds"] > 0
    json.dumps(bench.figures())
    print(f"2q: r = {bench.error_per_clifford:.4e} +- {bench.error_per_clifford_error:.1e}, "
          f"analytic {3 * (1 - p) / 4:.4e}; estimated {bench.cost['estimated_seconds']:.2f} s,"
          f" took {bench.seconds:.2f} s")


def test_two_qubit_runs_are_refused_when_too_costly_or_malformed():
    maps = qubit_maps({g: rot(g) for g in FULL})
    with pytest.raises(InputError, match=r"would take about .* more than max_seconds"):
        predict_pair_rb("CZ", pair_gate_unitary("CZ")[1], (maps, maps), sequences=5,
                        max_seconds=1e-9)
    with pytest.raises(InputError, match="CZ, CNOT or iSWAP"):
        predict_pair_rb("sqrt(iSWAP)", np.eye(4), (maps, maps))
    with pytest.raises(InputError, match="4x4 unitary or a 16x16"):
        predict_pair_rb("CZ", np.eye(9), (maps, maps))
    cost = estimate_pair_cost((3, 3), (1, 10, 100), 20)
    assert cost["map_applications"] == pytest.approx(20 * (2 + 11 + 101) * 4.0)


def test_ideal_gates_on_two_three_level_transmons_give_zero_error():
    # Magesan et al. (2011) again, with leakage levels present but unpopulated: phases on
    # them (here a CZ's arbitrary phases on levels 2) change nothing and nothing leaks
    maps = qubit_maps({g: rot(g, levels=3) for g in FULL}, levels=3)
    cz = np.diag(np.exp(0.4j * np.arange(9))).astype(complex)
    cz[np.ix_([0, 1, 3, 4], [0, 1, 3, 4])] = np.diag([1, 1, 1, -1])  # |q0 q1> = 3 q0 + q1
    bench = predict_pair_rb("CZ", cz, (maps, maps), lengths=(1, 2, 4), sequences=3)
    assert abs(bench.error_per_clifford) < 1e-12
    assert bench.leakage is None
