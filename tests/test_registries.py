"""Adding a system model, a line stage kind, a waveform format, an optimisation method or a
cost term is one module and one registration (DEVELOPERS.md, "Where new things go"): each
test here registers a toy one from outside the package and takes it through the ordinary
entry points, touching nothing else: ``shaper.optimize`` on a small fast recipe, then
``shaper check`` on the file it gives (in this process, where the toy is registered). The
per-slice states a sequential method needs are checked against GRAPE's gradient formula."""

import json
import tomllib
from dataclasses import dataclass
from pathlib import Path

import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg

import shaper
from shaper.cli.main import main
from shaper.costs import terms
from shaper.io import writers
from shaper.jobs.playback import Playback
from shaper.jobs.waveform import make_waveform
from shaper.optimizer import methods
from shaper.optimizer.objective import make_objective
from shaper.optimizer.tracker import StopReason, Tracker
from shaper.physics.transmons import TransmonSpec, coupled_transmons
from shaper.recipe import lines, load_recipe, models, schema
from shaper.recipe.lines import Stage
from shaper.signal import line

ROOT = Path(__file__).parent.parent
DEMO = tomllib.loads((ROOT / "recipes" / "demo-x180.toml").read_text())
# the demo made small and fast for the toys: 3 Duffing levels, an ideal staircase, the
# rotating frame in the optimiser and the verdict (the ladder toy turns the lab frame on)
FAST = {**DEMO, "system": {**DEMO["system"], "levels": 3, "spectrum": "duffing"},
        "awg": {"filter": "none"}, "optimizer": {"max_iterations": 100, "lab_frame": "off"},
        "verdict": {"lab_frame": "off"}}


@pytest.fixture
def restore():
    """Registries are module state: put them back after each test."""
    registries = (models.MODELS, line.RESPONSES, writers.WRITERS, schema.METHODS,
                  schema.KEYS, schema.DEFAULT_WEIGHTS, lines.KINDS, terms.TERMS)
    saved = tuple(dict(registry) for registry in registries)
    yield
    for live, old in zip(registries, saved, strict=True):
        live.clear()
        live.update(old)


def toml(raw: dict) -> str:
    """A recipe's raw content as TOML text (every top-level key with an inline value)."""
    def value(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return json.dumps(v)
        if isinstance(v, int | float):
            return repr(v)
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return "{" + ", ".join(f"{k} = {value(x)}" for k, x in v.items()) + "}"
    text = "".join(f"{k} = {value(v)}\n" for k, v in raw.items())
    assert tomllib.loads(text) == raw
    return text


def optimized(raw: dict, folder: Path, *, format: str = "csv"):
    """``shaper.optimize`` on the recipe, its best pulse made into a file as the run would
    export it and written in ``format`` beside the recipe's TOML file. Returns the recipe,
    the result, the waveform and the paths (the waveform file first, then the recipe)."""
    recipe = load_recipe(raw)
    result = shaper.optimize(recipe)
    wave, _ = make_waveform(recipe, result.samples, recipe.export, recipe.sample_rate_hz)
    folder.mkdir(parents=True, exist_ok=True)
    files = writers.write_waveform(folder, recipe.name, wave, recipe.system,
                                   recipe_name=recipe.name, recipe_sha256=recipe.sha256,
                                   format=format)
    (folder / "recipe.toml").write_text(toml(raw))
    return recipe, result, wave, [files[0], folder / "recipe.toml"]


def check(capsys, waveform: Path, recipe: Path, *flags) -> tuple[int, dict | str]:
    """``shaper check RECIPE WAVEFORM --json FLAGS`` in this process (where the toys are
    registered): the exit code and the printed verdict (or the error line)."""
    capsys.readouterr()
    code = main(["check", str(recipe), str(waveform), "--json", *flags])
    out, err = capsys.readouterr()
    return code, json.loads(out) if code in (0, 1) else err


def spin(r, t):
    """A toy model: a spin-1/2 with a splitting in the drive frame, driven by an I/Q pair."""
    delta = r.number(t, "splitting", "system.splitting", 0.0, kind="frequency")
    sx = np.array([[0, 0.5], [0.5, 0]], complex)
    sy = np.array([[0, -0.5j], [0.5j, 0]], complex)
    return shaper.from_matrices(np.diag([0.0, delta]), {"s_i": sx, "s_q": sy})


def test_a_toy_system_model_is_one_register_call(restore, tmp_path, capsys):
    models.register("spin", models.Model(("splitting",), spin))
    raw = {**FAST, "system": {"model": "spin", "splitting": "0 MHz"}}
    recipe, result, wave, (csv, toml_file) = optimized(raw, tmp_path)
    assert recipe.system.control_names == ("s_i", "s_q")
    # re-simulated here with scipy's expm on the recipe's own matrices: X up to a phase
    u = np.eye(2, dtype=complex)
    for row in result.samples:
        h = 2 * np.pi * (recipe.system.drift + np.tensordot(row, recipe.system.controls, 1))
        u = scipy.linalg.expm(-1j * h * recipe.dt) @ u
    x = np.array([[0, 1], [1, 0]])
    # average gate fidelity (|Tr(W^dag U)|^2 + d) / (d (d + 1)): Nielsen, Phys. Lett. A 303,
    # 249 (2002)
    fidelity = (abs(np.trace(x.conj().T @ u)) ** 2 + 2) / 6
    assert 1 - fidelity < 1e-6
    code, out = check(capsys, csv, toml_file)
    assert code == 0 and out["system_model"] == {"kind": "matrices"}, out
    assert "more_levels" not in out["trust"]  # its matrices fix its levels
    code, err = check(capsys, csv, toml_file, "--levels", "3")
    assert code == 2 and "matrices fix the levels" in err, err
    with pytest.raises(shaper.RecipeError, match="system.levels"):  # its keys, no other
        load_recipe({**raw, "system": {"model": "spin", "levels": 3}})


def ladder(r, t):
    """A toy model: one Duffing transmon in the frame of its drive, with keys of its own,
    built by the package's transmon builder (so it knows its lab frame)."""
    times = {f"{k}_s": r.number(t, k, f"system.{k}", kind="time", positive=True)
             for k in ("t1", "t2") if k in t}
    frequency = r.number(t, "frequency", "system.frequency", kind="frequency", positive=True)
    spec = TransmonSpec(name="q0", levels=r.number(t, "levels", "system.levels", 3,
                                                   integer=True),
                        qubit_frequency_hz=frequency, spectrum="duffing",
                        anharmonicity_hz=r.number(t, "anharmonicity", "system.anharmonicity",
                                                  kind="frequency"), **times)
    return coupled_transmons([spec], [], frame_frequency_hz=frequency)


LADDER = {"name": "ladder-x", "system": {"model": "ladder", "levels": 3,
                                         "frequency": "5.1 GHz", "anharmonicity": "-220 MHz"},
          "gate": {"target": "X"},
          "pulse": {"duration": "20 ns", "sample_rate": "2.4 GS/s", "max_rabi": "60 MHz"},
          "awg": {"filter": "none"}, "optimizer": {"max_iterations": 100, "lab_frame": "off"}}


def test_a_toy_model_with_a_lab_frame_owns_its_levels(restore, tmp_path, capsys):
    models.register("ladder", models.Model(("levels", "frequency", "anharmonicity", "t1",
                                            "t2"), ladder, level_tables=lambda t: [t]))
    recipe, result, wave, (csv, toml_file) = optimized(LADDER, tmp_path)
    assert recipe.system.lab is not None and recipe.verdict.extra_levels == 2
    playback = Playback(recipe, wave)
    verdict = playback.verdict()  # judged in the lab frame on 3 + 2 levels
    assert playback.more_levels.recipe.system.dims == (5,)
    assert verdict.met and verdict.basis.startswith("lab frame, 5 levels"), verdict
    code, out = check(capsys, csv, toml_file, "--levels", "4", "--t1", "40us")
    assert code == 0, out
    assert out["levels"] == [4] and out["trust"]["more_levels"]["levels"] == [6]
    assert out["open_system"]["coherence_times"]  # --t1 reached the model's table
    assert out["system_model"]["kind"] == "transmons"
    assert models.levels_key(LADDER["system"]) == "system.levels"
    assert models.levels_key({"model": "transmons", "transmon": [{"levels": 3}]}) == \
        "levels on every [[system.transmon]]"


@dataclass(frozen=True)
class Box:
    """The toy kind's own parameters: the width of its running mean."""

    width_s: float


def box(r, s, where, rate):
    return Stage("box", Box(width_s=r.number(s, "width", f"{where}.width", kind="time",
                                             positive=True)))


def box_cells(stage, h, cells):
    """A toy response: each fine cell's output is the mean input over the last width_s
    seconds of cells (a whole number of them here)."""
    width = round(stage.params.width_s / h)
    g = np.zeros(cells)
    g[:width] = 1 / width
    return g


def test_a_toy_line_kind_is_one_register_call(restore, tmp_path, capsys):
    line.register_kind("box", ("width",), box, line.Response("causal", box_cells), Box)
    raw = {**FAST, "line": {"oversample": 4, "q0": [{"kind": "box", "width": "0.3125 ns"}]}}
    recipe, result, wave, (csv, toml_file) = optimized(raw, tmp_path)
    stage = recipe.line.stages["q0"][0]
    assert stage.summary() == {"kind": "box", "width_s": pytest.approx(0.3125e-9)}
    # a held step through the line: the running mean over 0.3125 ns = 3 fine cells (0.1042 ns
    # each at 2.4 GS/s x 4), then the mean over each AWG sample, computed here by hand
    held = np.zeros(6)
    held[1:] = 1.0
    out = line.through_line(held, recipe.line.stages["q0"], 1 / 2.4e9, 4)
    fine = np.convolve(np.repeat(held, 4), np.full(3, 1 / 3))[:24]
    assert np.allclose(out, fine.reshape(6, 4).mean(axis=1), atol=1e-12)
    code, out = check(capsys, csv, toml_file)
    assert code == 0, out
    assert out["line"]["channels"]["q0"] == [{"kind": "box",
                                              "width_s": pytest.approx(0.3125e-9)}]


def numpy_archive(folder, name, wave, system, source):
    """A toy format: one ``.npz`` of the fractions of full scale with the sample rate and the
    full scale (one channel), which ``shaper check`` reads back."""
    path = folder / f"{name}.npz"
    np.savez(path, samples=wave.fractions, columns=np.array(wave.column_names),
             sample_rate_hz=wave.sample_rate_hz,
             full_scale_hz=next(iter(wave.full_scale_hz.values())))
    return [path]


def test_a_toy_waveform_format_is_one_register_call(restore, tmp_path, capsys):
    writers.register("archive", writers.Writer("one .npz with its sample rate and full scale",
                                               numpy_archive,
                                               lambda name, system: [f"{name}.npz"]))
    run = shaper.run(load_recipe(FAST), out=tmp_path / "run", plots_too=False)
    from shaper.jobs.reexport import reexport

    report = reexport(run.folder, out=tmp_path / "npz", format="archive")  # shaper export
    assert report["files"] == ["demo-x180.npz"]
    assert json.loads((tmp_path / "npz" / "export.json").read_text())["waveform"] == \
        "demo-x180.npz"
    (tmp_path / "recipe.toml").write_text(toml(FAST))
    code, out = check(capsys, tmp_path / "npz" / "demo-x180.npz", tmp_path / "recipe.toml")
    assert code == 0 and out["samples"] == report["samples"], out
    # the same judged figures as the run's own file (the archive keeps the fractions
    # exactly; both judged on the same model)
    assert out["judged_on"] == run.report["judged_on"]
    assert out["infidelity"] == pytest.approx(run.report["infidelity"], rel=1e-9, abs=1e-15)


def descent(session, x0, resume=None):
    """A toy method: plain gradient descent with a fixed step on the objective."""
    tracker = Tracker(session)
    obj, x = session.objective, np.array(x0)
    weights = np.asarray(obj.weights)
    while True:
        (value, (parts, scores)), grad = obj.value_and_grad(x, obj.problem, weights)
        tracker.evaluations += 1
        tracker.offer(float(value), x, parts, 1 - float(scores.nominal.fidelity),
                      float(scores.nominal.leakage))
        x = x - 0.02 * np.asarray(grad)
        if tracker.iterations_done(1):
            return tracker.result()


def test_a_toy_optimisation_method_is_one_register_call(restore, tmp_path, capsys):
    methods.register("descent", descent, "plain gradient descent (a test's toy)")
    raw = {**FAST, "optimizer": {**FAST["optimizer"], "method": "descent",
                                 "max_iterations": 30}}
    recipe, result, wave, (csv, toml_file) = optimized(raw, tmp_path)
    costs = [h["cost"] for h in result.history]
    assert result.best.stop_reason == StopReason.ITERATION_LIMIT and len(costs) == 30
    assert costs[-1] < costs[0]
    code, out = check(capsys, csv, toml_file)  # 30 plain steps do not reach the targets
    assert code == 1 and not out["pass"], out
    # the optimiser's model here is the rotating frame on the recipe's levels
    assert out["trust"]["rotating_frame"]["infidelity"] == pytest.approx(
        result.best.infidelity, rel=1e-3)
    with pytest.raises(shaper.RecipeError, match="optimizer.method"):
        load_recipe({**FAST, "optimizer": {"method": "nonesuch"}})


def power(limits_hz):
    """A toy cost term: the mean square of the samples as fractions of their limits."""
    return terms.CostTerm("power", lambda samples, problem, scores: jnp.mean(
        (samples / limits_hz) ** 2))


def test_a_toy_cost_term_is_one_register_call(restore, tmp_path, capsys):
    terms.register("power", terms.Registered(
        power, lambda recipe, layout: power(layout.column_limits()),
        lambda recipe: recipe.weights["power"] > 0), weight=0.0)
    raw = {**FAST, "cost": {"power": 1e-3}}
    recipe, result, wave, (csv, toml_file) = optimized(raw, tmp_path)
    assert result.objective.names == ("infidelity", "power")
    limits = np.array([recipe.limits_hz["q0"]] * 2)
    # its value at the best point, computed here from the samples
    assert result.best.parts["power"] == pytest.approx(
        np.mean((result.samples / limits) ** 2), rel=1e-9)
    code, out = check(capsys, csv, toml_file)
    assert code == 0, out
    with pytest.raises(shaper.RecipeError, match="cost.powder"):
        load_recipe({**FAST, "cost": {"powder": 1.0}})


def test_slice_states_give_grape_gradient():
    # GRAPE's gradient for piecewise-constant controls: d Phi / d u_kj =
    # 2 Re[ conj(Tr(W^dag U)) Tr(W^dag L_k dP_k F_{k-1}) ] / d_c^2 (Khaneja et al.,
    # J. Magn. Reson. 172, 296 (2005), eq. (13), from memory), with F_k the propagator after
    # slice k and L_k the slices after it, and dP_k = -i pi dt (H_j P_k + P_k H_j) (the
    # symmetric first-order form, accurate to second order in dt; de Fouquieres et al.,
    # J. Magn. Reson. 212, 412 (2011), from memory). Slices of 42 ps on 3 levels keep
    # 2 pi dt ||H|| near 0.06, so the formula holds to about 2e-6 (measured).
    raw = {**DEMO, "system": {**DEMO["system"], "levels": 3},
           "pulse": {**DEMO["pulse"], "duration": "4 ns", "sample_rate": "24 GS/s"},
           "awg": {"filter": "none"}}  # an ideal staircase: one slice per sample
    recipe = load_recipe(raw)
    obj = make_objective(recipe)
    rng = np.random.default_rng(3)
    params = rng.normal(0, 0.3, obj.layout.shape)
    forward, later = obj.slice_states(params)
    whole = forward[-1]
    assert np.allclose(np.einsum("kab,kbc->kac", later, forward), whole, atol=1e-12)
    comp = np.asarray(obj.problem.computational)
    w = np.asarray(obj.problem.target)
    overlap = np.trace(w.conj().T @ whole[np.ix_(comp, comp)])
    dt = float(np.asarray(obj.problem.dt))
    grape = np.empty((len(forward), 2))
    for j in range(2):
        h = np.asarray(obj.problem.controls[j])
        before = np.concatenate([np.eye(whole.shape[0])[None], forward[:-1]])
        slice_k = np.einsum("kab,kcb->kac", forward, before.conj())  # P_k = F_k F_{k-1}^dag
        d_slice = -1j * np.pi * dt * (h @ slice_k + slice_k @ h)
        step = np.einsum("kab,kbc,kcd->kad", later, d_slice, before)
        grape[:, j] = 2 * np.real(np.conj(overlap) * np.einsum(
            "ab,kba->k", w.conj().T, step[:, comp][:, :, comp])) / len(comp) ** 2

    import jax

    from shaper.signal.pulses import to_samples

    def phi(samples):
        u = jax.numpy.eye(whole.shape[0], dtype=complex)
        for k in range(samples.shape[0]):
            hk = obj.problem.drift + jax.numpy.tensordot(samples[k], obj.problem.controls, 1)
            u = jax.scipy.linalg.expm(-2j * np.pi * dt * hk) @ u
        tr = jax.numpy.trace(w.conj().T @ u[np.ix_(comp, comp)])
        return jax.numpy.abs(tr) ** 2 / len(comp) ** 2

    samples = np.asarray(to_samples(params, obj.layout, obj.problem.envelope))
    exact = np.asarray(jax.grad(phi)(samples))
    assert np.max(np.abs(grape - exact)) < 1e-4 * np.max(np.abs(exact))
