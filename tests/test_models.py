import numpy as np
import pytest
from helpers import duffing

from shaper.errors import InputError
from shaper.physics.systems import from_matrices
from shaper.physics.targets import gate, state_transfer
from shaper.physics.transmons import TransmonSpec, coupled_transmons, transmon


def test_transmon_matches_duffing_model_by_hand():
    # Koch et al., Phys. Rev. A 76, 042319 (2007), Duffing form, drive frame (README, "Conventions")
    s = transmon(5, 5.1e9, -220e6, drive_frequency_hz=5.097e9, spectrum="duffing")
    drift, controls = duffing(5, 3e6, -220e6)
    assert np.allclose(s.drift, drift, atol=1e-6)
    assert np.allclose(s.controls, controls, atol=1e-15)
    assert s.control_names == ("q0_i", "q0_q")
    assert list(s.computational) == [0, 1]


def test_two_level_controls_are_pauli_halves():
    # common practice, no source: on two levels (a + a^dag)/2 = X/2 and i(a^dag - a)/2 = Y/2
    s = transmon(2, 5e9, -200e6, spectrum="duffing")
    assert np.allclose(s.controls[0], gate("X").unitary / 2)
    assert np.allclose(s.controls[1], gate("Y").unitary / 2)


def test_coupled_transmons_order_coupling_and_flux():
    # the Duffing ladder pinned: the coupling g (a^dag b + b^dag a) and the flux line on the
    # number operator below are its operators (README, "Conventions"); the charge model's
    # flux response is not the number operator (level 2 moves 2.003x, not 2x, per hertz)
    specs = [TransmonSpec(name="a", levels=3, qubit_frequency_hz=5.0e9, anharmonicity_hz=-0.2e9,
                          spectrum="duffing"),
             TransmonSpec(name="b", levels=3, qubit_frequency_hz=5.5e9, anharmonicity_hz=-0.2e9,
                          flux=True, spectrum="duffing")]
    s = coupled_transmons(specs, [("a", "b", 10e6)])
    assert s.dims == (3, 3)
    # computational states |00>, |01>, |10>, |11> with the first transmon leftmost
    assert list(s.computational) == [0, 1, 3, 4]
    assert s.control_names == ("a_i", "a_q", "b_i", "b_q", "b_flux")
    # <01| H |10> = g  (a^dag b + b^dag a, README "Conventions")
    assert s.drift[1, 3] == pytest.approx(10e6)
    # |01> has b excited: detuning of b from the frame (a's frequency) is 500 MHz
    assert s.drift[1, 1].real == pytest.approx(0.5e9)
    assert np.allclose(s.controls[4], np.kron(np.eye(3), np.diag([0, 1, 2])))


def test_from_matrices_pairs_i_and_q_and_validates():
    drift = np.diag([0.0, 0.0, -200e6])
    a = np.diag([1, np.sqrt(2)], 1)
    s = from_matrices(drift, {"d_i": (a + a.T) / 2, "d_q": 1j * (a.T - a) / 2,
                              "z": np.diag([0, 1, 2])})
    assert [c.name for c in s.channels] == ["d", "z"]
    assert [c.kind for c in s.channels] == ["iq", "baseband"]
    with pytest.raises(InputError, match="not Hermitian"):
        from_matrices(np.array([[0, 1], [0, 0]]), {"x": np.eye(2)})
    with pytest.raises(InputError, match="has shape"):
        from_matrices(np.eye(3), {"x": np.eye(2)})
    with pytest.raises(InputError, match="multiply to"):
        from_matrices(np.eye(4), {"x": np.eye(4)}, dims=[3, 2])


def test_levels_below_two_refused():
    with pytest.raises(InputError, match="levels must be a whole number >= 2"):
        transmon(1, 5e9, -200e6)


@pytest.mark.parametrize("name", ["X", "Y", "Z", "X/2", "Y/2", "H", "S", "T", "I", "CZ",
                                  "CNOT", "iSWAP", "sqrt(iSWAP)"])
def test_targets_are_unitary(name):
    u = gate(name).unitary
    assert np.allclose(u.conj().T @ u, np.eye(len(u)), atol=1e-15)


def test_known_gate_identities():
    # Nielsen and Chuang (2000), ch. 4: (X/2)^2 = -iX, S^2 = Z, T^2 = S, H Z H = X,
    # sqrt(iSWAP)^2 = iSWAP
    g = {n: gate(n).unitary for n in ["X/2", "X", "S", "Z", "T", "H", "iSWAP", "sqrt(iSWAP)"]}
    assert np.allclose(g["X/2"] @ g["X/2"], -1j * g["X"])
    assert np.allclose(g["S"] @ g["S"], g["Z"])
    assert np.allclose(g["T"] @ g["T"], g["S"])
    assert np.allclose(g["H"] @ g["Z"] @ g["H"], g["X"])
    assert np.allclose(g["sqrt(iSWAP)"] @ g["sqrt(iSWAP)"], g["iSWAP"])
    assert np.allclose(gate(["X", "I"]).unitary, np.kron(g["X"], np.eye(2)))


def test_bad_targets():
    with pytest.raises(InputError, match="not unitary"):
        gate(np.array([[1, 1], [0, 1]]))
    with pytest.raises(InputError, match="unknown gate 'W'"):
        gate("W")
    with pytest.raises(InputError, match="acts on 2 qubit"):
        gate("CZ", qubits=1)
    with pytest.raises(InputError, match="one length"):
        state_transfer([1, 0], [0, 1, 0])
