"""Neighbouring qubits' gates played at the same time (README, "Chips: simultaneous
gates"): ``[gates] simultaneous = true``.

For every pair of qubits that is coupled or has a ``[[crosstalk]]`` entry, and every
single-qubit gate both qubits have, the two exported files are played together on the
pair: both transmons (the chip's levels), their coupling, in the dressed basis, the frame
at the first qubit's frequency; each qubit's own drive at its own carrier, and each line's
leak into the other qubit as one more drive of that qubit at the leaking line's carrier,
its envelope the line's own times the complex amplitude ratio. The target is the gate on
both, with virtual Z on both; the shorter file is padded with zeros. This is a check of
the files as made, not a joint optimisation.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from shaper.io import atomic
from shaper.recipe.chip_recipes import together_recipe


def together_pairs(chip) -> list[tuple[str, str]]:
    """The pairs whose gates are played together: every coupled pair and every pair with a
    ``[[crosstalk]]`` entry, once each, in the chip's order."""
    out, seen = [], set()
    for a, b in list(chip.pairs) + [(f, t) for f, t, _ in chip.crosstalk]:
        if frozenset((a, b)) not in seen:
            seen.add(frozenset((a, b)))
            out.append((a, b))
    return out


def play_pair(chip, a: str, b: str, rows: list[dict], root: str) -> list[dict]:
    """One pair's gates played at once (module docstring): one entry per gate both qubits
    have, with each file's own figure beside the joint one. A unit of the chip's executor
    (:func:`shaper.jobs.chip.run_chip` submits it once both qubits' gates are made): plain
    data in and out, so it runs in a worker and is recorded in chip.json."""
    from shaper.io.waveio import Waveform, read_waveform
    from shaper.jobs.playback import Playback
    from shaper.recipe import load_recipe

    leak = {(f, t): r for f, t, r in chip.crosstalk}
    root = Path(root)
    singles = {(r["subject"], r["gate"]): r for r in rows if r["subject"] in (a, b)}
    out = []
    for (subject, label), row_a in singles.items():
        row_b = singles.get((b, label))
        if subject != a or row_b is None:
            continue
        waves = [read_waveform(root / r["waveform"]) for r in (row_a, row_b)]
        if any(w.if_frequency_hz or w.predistorted or w.mixer_corrected for w in waves):
            continue  # this check plays baseband files only (said in the README)
        envelopes = [_envelope(w, q) for w, q in zip(waves, (a, b), strict=True)]
        n = max(len(e) for e in envelopes)
        wa, wb = (np.pad(e, (0, n - len(e))) for e in envelopes)
        columns = [wa, wb, leak.get((a, b), 0) * wa, leak.get((b, a), 0) * wb]
        samples = np.stack([part for w in columns for part in (w.real, w.imag)], axis=1)
        raw = together_recipe(chip, a, b, label)
        raw["pulse"]["duration"] = f"{n / waves[0].sample_rate_hz!r} s"
        recipe = load_recipe(raw)
        names = [f"{c}_{p}" for c in (a, b, f"{a}_to_{b}", f"{b}_to_{a}") for p in "iq"]
        wave = Waveform(fractions=samples, sample_rate_hz=waves[0].sample_rate_hz,
                        full_scale_hz={c.name: 1.0 for c in recipe.system.channels},
                        column_names=tuple(names))
        played = Playback(recipe, wave).nominal
        ratios = [leak.get((a, b), 0), leak.get((b, a), 0)]
        out.append({"pair": f"{a}-{b}", "gate": label, "infidelity": played.infidelity,
                    "leakage": played.leakage,
                    "own": [row_a["infidelity"], row_b["infidelity"]],
                    "crosstalk": [[complex(z).real, complex(z).imag] for z in ratios]})
    return out


def mark_rows(rows, found: list[dict]) -> None:
    """Each gate row's worst joint figure over the pairs it is in."""
    for row in rows:
        joint = [e["infidelity"] for e in found if e["gate"] == row.gate
                 and row.subject in e["pair"].split("-")]
        row.simultaneous_infidelity = max(joint) if joint else None


def _envelope(wave, channel: str) -> np.ndarray:
    """A channel's I + iQ in Hz (Rabi frequency) from a baseband waveform file."""
    names = list(wave.column_names)
    scale = wave.full_scale_hz[channel]
    return scale * (wave.fractions[:, names.index(f"{channel}_i")]
                    + 1j * wave.fractions[:, names.index(f"{channel}_q")])


def write_together(out: Path, found: list[dict]) -> Path:
    """``chip-simultaneous.csv`` and a section of ``chip.md``."""
    def ratio(z):
        z = complex(*z) if isinstance(z, list | tuple) else complex(z)
        return f"{z.real:+.4f}{z.imag:+.4f}j"

    lines = ["pair,gate,infidelity,leakage,own_infidelity_first,own_infidelity_second,"
             "crosstalk_first_to_second,crosstalk_second_to_first"] + [
        f"{e['pair']},{e['gate']},{e['infidelity']:.6e},{e['leakage']:.6e},"
        f"{e['own'][0]:.6e},{e['own'][1]:.6e},{ratio(e['crosstalk'][0])},"
        f"{ratio(e['crosstalk'][1])}" for e in found]
    path = out / "chip-simultaneous.csv"
    atomic.write_text(path, "\n".join(lines) + "\n")
    table = ["", "## Gates played at the same time", "",
             "Both files of a pair at once on the pair (dressed basis, rotating frame, the "
             "chip's levels), each line reaching the other qubit by its crosstalk ratio; the "
             "joint infidelity of the gate on both, and each file's own figure as judged in the "
             "gates table (README, \"Chips: simultaneous gates\").", "",
             "| pair | gate | together: infidelity, leakage | each as judged | crosstalk |",
             "|---|---|---|---|---|"] + [
        f"| {e['pair']} | {e['gate']} | {e['infidelity']:.2e}, {e['leakage']:.2e} | "
        f"{e['own'][0]:.2e}, {e['own'][1]:.2e} | {ratio(e['crosstalk'][0])}, "
        f"{ratio(e['crosstalk'][1])} |" for e in found]
    atomic.write_text(out / "chip.md", (out / "chip.md").read_text() + "\n".join(table) + "\n")
    return path
