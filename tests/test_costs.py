import jax.numpy as jnp
import numpy as np
import pytest

from shaper import costs
from shaper.errors import InputError
from shaper.objective import make_objective
from shaper.recipe import load_recipe

DEMO = {"name": "c", "system": {"model": "transmon", "levels": 3, "qubit_frequency": "5 GHz",
                                "anharmonicity": "-200 MHz"},
        "gate": {"target": "X"},
        "pulse": {"duration": "10 ns", "sample_rate": "2 GS/s", "max_rabi": "80 MHz",
                  "bandwidth": "100 MHz"},
        "cost": {"smoothness": 0.1}}


def test_registry_lists_valid_terms():
    assert costs.make_term("leakage").name == "leakage"
    with pytest.raises(InputError, match="unknown cost term 'purity'; known terms: infidelity"):
        costs.make_term("purity")


def test_duplicate_names_refused():
    with pytest.raises(InputError, match="must be unique"):
        costs.combine([costs.leakage(), costs.leakage()])


def test_changing_weights_does_not_recompile():
    objective = make_objective(load_recipe(DEMO))
    assert objective.names == ("infidelity", "bandwidth", "smoothness")
    x = jnp.zeros((objective.layout.slices, objective.layout.controls)) + 0.1
    objective.value_and_grad(x, objective.problem, jnp.asarray([1.0, 1.0, 0.1]))
    (total, (parts, _)), _ = objective.value_and_grad(x, objective.problem,
                                                      jnp.asarray([1.0, 5.0, 0.0]))
    assert len(objective.traces) == 1
    assert float(total) == pytest.approx(float(parts["infidelity"] + 5 * parts["bandwidth"]),
                                         rel=1e-12)


def test_out_of_band_fraction_of_pure_tones():
    # Fourier fact (common practice, no source): a complex tone carries all its energy at its
    # own frequency, so it is all in band below the cutoff and all out of band above it
    # (up to the sinc tails of the finite, zero-padded window: about 1/(pi^2 N |f - f_c| dt),
    # 5e-3 here).
    n, dt = 400, 0.5e-9
    t = np.arange(n) * dt
    for f, expected in ((20e6, 0.0), (300e6, 1.0)):
        z = np.exp(2j * np.pi * f * t)
        samples = jnp.asarray(np.column_stack([z.real, z.imag]))
        frac = float(costs.out_of_band(samples, dt, 100e6, np.array([[0, 1]]), np.array([], int)))
        assert frac == pytest.approx(expected, abs=1e-2)
