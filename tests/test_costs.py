import jax.numpy as jnp
import numpy as np
import pytest

from shaper import costs
from shaper.errors import InputError
from shaper.optimise.objective import make_objective
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
    x = jnp.zeros(objective.layout.shape) + 0.1
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


# every registered term switched on at once (two transmons, flux, bandwidth, an ensemble)
EVERY_TERM = {
    "name": "every", "system": {"model": "transmons", "transmon": [
        {"name": "qa", "levels": 3, "qubit_frequency": "5 GHz", "anharmonicity": "-200 MHz",
         "flux": True},
        {"name": "qb", "levels": 3, "qubit_frequency": "5.3 GHz", "anharmonicity": "-200 MHz"}],
        "coupling": [{"between": ["qa", "qb"], "strength": "5 MHz"}]},
    "gate": {"target": "CZ", "virtual_z": True},
    "pulse": {"duration": "10 ns", "sample_rate": "2 GS/s", "max_rabi": "40 MHz",
              "max_flux": "500 MHz", "bandwidth": "150 MHz"},
    "cost": {"leakage": 1.0, "smoothness": 0.1, "amplitude": 1.0,
             "ensemble_scales": [0.98, 1.02]},
}


def test_every_registered_term_has_a_default_weight_and_a_recipe_key():
    from shaper.recipe.schema import DEFAULT_WEIGHTS, KEYS

    assert set(costs.TERMS) == set(DEFAULT_WEIGHTS)
    assert set(DEFAULT_WEIGHTS) - {"infidelity"} <= set(KEYS["cost"])


@pytest.mark.parametrize("where", ["zero", "limit"])
def test_battery_of_every_registered_term(where):
    # each term: finite value and finite float64 gradient at zero controls (levels 0 and 1
    # degenerate: the case where naive derivatives give NaN) and deep at the amplitude
    # limit; the second call does not compile again
    objective = make_objective(load_recipe(EVERY_TERM))
    assert set(objective.names) == set(costs.TERMS)
    shape = objective.layout.shape
    x = jnp.zeros(shape) if where == "zero" else jnp.full(shape, 40.0)
    w = jnp.asarray(objective.weights)
    for _ in range(2):
        (total, (parts, scores)), grad = objective.value_and_grad(x, objective.problem, w)
    assert len(objective.traces) == 1
    assert grad.dtype == jnp.float64 and total.dtype == jnp.float64
    assert np.all(np.isfinite(np.asarray(grad)))
    for name in costs.TERMS:
        assert np.isfinite(float(parts[name])), name
        # each term alone has a finite gradient too
        alone = jnp.asarray([1.0 if n == name else 0.0 for n in objective.names])
        (_, _), g = objective.value_and_grad(x, objective.problem, alone)
        assert np.all(np.isfinite(np.asarray(g))), name
    assert len(objective.traces) == 1


def test_an_objective_refuses_a_recipe_that_differs_in_more_than_duration():
    objective = make_objective(load_recipe(DEMO))
    shorter = {**DEMO, "pulse": {**DEMO["pulse"], "duration": "8 ns"}}
    assert objective.for_recipe(load_recipe(shorter)).layout.samples == 20
    other = {**DEMO, "pulse": {**DEMO["pulse"], "duration": "8 ns", "max_rabi": "50 MHz"}}
    with pytest.raises(InputError, match="more than its duration"):
        objective.for_recipe(load_recipe(other))


def test_settings_guard_themselves():
    import dataclasses

    recipe = load_recipe(DEMO)
    with pytest.raises(InputError, match="setting method cannot be 'newton'"):
        dataclasses.replace(recipe.optimizer, method="newton")
    with pytest.raises(InputError, match="setting dac_bits cannot be 64"):
        dataclasses.replace(recipe.export, dac_bits=64)
    assert dataclasses.replace(recipe.export, dac_bits=None).dac_bits is None
