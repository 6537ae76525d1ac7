import jax.numpy as jnp
import numpy as np
import pytest
from helpers import pinned

from shaper import costs
from shaper.errors import InputError
from shaper.optimizer.objective import build_objective, make_objective
from shaper.recipe import load_recipe

# the Duffing ladder and held samples, as the references of tests/helpers.py build them
DEMO = pinned({"name": "c", "system": {"model": "transmon", "levels": 3,
                                       "qubit_frequency": "5 GHz", "anharmonicity": "-200 MHz"},
               "gate": {"target": "X"},
               "pulse": {"duration": "10 ns", "sample_rate": "2 GS/s", "max_rabi": "80 MHz",
                         "bandwidth": "100 MHz"},
               "cost": {"smoothness": 0.1}})


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
    objective = build_objective(load_recipe(EVERY_TERM))  # fresh: its own trace count
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


def test_ensemble_holding_the_nominal_point_propagates_it_once():
    import jax
    from helpers import duffing, expm_product, pedersen_fidelity, subspace_leakage

    from shaper.physics._jax import device

    grid = {"robustness": 1.0, "ensemble_detunings": ["-2 MHz", "0 MHz", "2 MHz"],
            "ensemble_scales": [0.97, 1.0, 1.03]}
    recipe = load_recipe({**DEMO, "cost": grid})
    problem = costs.make_problem(recipe)
    # nominal + 9 grid points, of which (0 MHz, 1.0) is the nominal system: 9 propagations
    assert problem.member_rows.shape == (10,) and problem.detunings.shape == (9, 1)
    rng = np.random.default_rng(4)
    samples = rng.uniform(-40e6, 40e6, size=(recipe.samples, 2))
    flags = {"qubits": 1, "is_gate": True, "virtual_z": False}
    scores = costs.evaluate_members(device(samples), problem, **flags)
    x = np.array([[0, 1], [1, 0]])
    detunings = np.concatenate([[0.0], recipe.ensemble_detunings_hz[:, 0]])
    scales = np.concatenate([[1.0], recipe.ensemble_scales])
    for m, (det, scale) in enumerate(zip(detunings, scales, strict=True)):
        # reference: scipy.linalg.expm slice products of the Duffing model (tests/helpers.py)
        u = expm_product(*duffing(3, det, -200e6), samples * scale, 0.5e-9)
        assert float(scores.members.fidelity[m]) == pytest.approx(
            pedersen_fidelity(u[:2, :2], x), abs=1e-12)
        assert float(scores.members.leakage[m]) == pytest.approx(
            subspace_leakage(u, [0, 1]), abs=1e-12)

    # the gradient through the shared member equals the one with every member propagated
    full = problem._replace(detunings=device(detunings[:, None]), scales=device(scales),
                            member_rows=device(np.arange(10)))

    def mean_infidelity(s, p):
        return 1 - jnp.mean(costs.evaluate_members(s, p, **flags).members.fidelity[1:])
    shared = jax.grad(mean_infidelity)(device(samples), problem)
    every = jax.grad(mean_infidelity)(device(samples), full)
    scale = float(jnp.max(jnp.abs(every)))
    assert scale > 0 and float(jnp.max(jnp.abs(shared - every))) < 1e-12 * scale
