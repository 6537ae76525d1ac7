"""Predicted randomized benchmarking (shaper.physics.clifford, clifford_pairs, gate_maps,
rb_fit, benchmarking, interleaved, benchmarking_pairs), each check against a reference
from outside the project: closed forms, published counts, brute-force enumeration, and
matrices built here with scipy."""

import numpy as np
import pytest
import scipy.linalg

from shaper.errors import InputError
from shaper.physics.clifford import compile_cliffords, single_qubit_cliffords

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


