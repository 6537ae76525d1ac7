"""PNG plots of a run: I/Q vs time, spectrum with the cutoff, level populations, convergence.

matplotlib with the Agg backend (no screen needed). Each function writes one file.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _finish(fig, path: Path) -> None:
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    _pyplot().close(fig)


def plot_waveform(path: Path, samples_hz: np.ndarray, dt: float, names, limits=None) -> None:
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(8, 3.5))
    t_ns = np.arange(samples_hz.shape[0] + 1) * dt * 1e9
    for k, name in enumerate(names):
        ax.stairs(samples_hz[:, k] / 1e6, t_ns, label=name, linewidth=1.4)
    for lim in sorted(set(limits or [])):
        ax.axhline(lim / 1e6, color="grey", linestyle=":", linewidth=0.8)
        ax.axhline(-lim / 1e6, color="grey", linestyle=":", linewidth=0.8)
    ax.set_xlabel("time (ns)")
    ax.set_ylabel("MHz (Rabi frequency; flux: shift)")
    ax.set_title("Drive samples as held by the DAC (dotted: amplitude limit)")
    ax.legend(loc="upper right", fontsize=8)
    _finish(fig, path)


def plot_spectrum(path: Path, samples_hz: np.ndarray, dt: float, channels, *,
                  cutoff_hz: float | None = None, markers: dict | None = None) -> None:
    """Power spectrum per channel (I + iQ for I/Q channels) with the cutoff and transitions."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(8, 3.5))
    n = samples_hz.shape[0]
    pad = max(1024, 8 * n)
    freqs = np.fft.fftshift(np.fft.fftfreq(pad, dt)) / 1e6
    for ch in channels:
        cols = list(ch.columns)
        signal = samples_hz[:, cols[0]] + (1j * samples_hz[:, cols[1]] if len(cols) == 2 else 0)
        power = np.abs(np.fft.fftshift(np.fft.fft(signal, pad))) ** 2
        ax.semilogy(freqs, power / max(power.max(), 1e-300) + 1e-16, label=ch.name)
    if cutoff_hz:
        for sign in (-1, 1):
            ax.axvline(sign * cutoff_hz / 1e6, color="red", linestyle="--", linewidth=0.9,
                       label="bandwidth cutoff" if sign > 0 else None)
    for label, f in (markers or {}).items():
        ax.axvline(f / 1e6, color="purple", linestyle=":", linewidth=0.9)
        ax.text(f / 1e6, 1e-13, " " + label, rotation=90, fontsize=7, color="purple")
    span = max(4 * (cutoff_hz or 0), 4 * max([abs(f) for f in (markers or {}).values()] or [0]),
               5 / (n * dt)) / 1e6
    ax.set_xlim(-span, span)
    ax.set_ylim(1e-14, 2)
    ax.set_xlabel("frequency relative to the drive (MHz)")
    ax.set_ylabel("relative power")
    ax.set_title("Pulse spectrum")
    ax.legend(loc="upper right", fontsize=8)
    _finish(fig, path)


def plot_populations(path: Path, populations: np.ndarray, dt: float, labels,
                     input_labels) -> None:
    """One panel per computational input state: population of every level over time."""
    plt = _pyplot()
    count = min(len(input_labels), 4)
    fig, axes = plt.subplots(1, count, figsize=(4 * count, 3.2), squeeze=False)
    t_ns = np.arange(populations.shape[1]) * dt * 1e9
    for j in range(count):
        ax = axes[0, j]
        for level, label in enumerate(labels):
            curve = populations[j, :, level]
            if curve.max() > 1e-3:  # one colour per level in every panel
                ax.plot(t_ns, curve, label=f"|{label}>", color=f"C{level % 10}")
        ax.set_title(f"start in |{input_labels[j]}>", fontsize=9)
        ax.set_xlabel("time (ns)")
        ax.set_ylim(-0.02, 1.02)
        ax.legend(fontsize=7)
    axes[0, 0].set_ylabel("population")
    _finish(fig, path)


def plot_convergence(path: Path, history: list[dict]) -> None:
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(6, 3.5))
    it = [h["iteration"] for h in history]
    for key, label in (("cost", "total cost"), ("infidelity", "infidelity"),
                       ("leakage", "leakage")):
        values = np.maximum([h[key] for h in history], 1e-17)
        ax.semilogy(it, values, marker=".", label=label)
    ax.set_xlabel("iteration")
    ax.set_title("Convergence (best so far)")
    ax.legend(fontsize=8)
    _finish(fig, path)


def plot_sensitivity(path: Path, sensitivity: dict) -> None:
    """Infidelity vs detuning offset and vs amplitude scale (log scale)."""
    plt = _pyplot()
    fig, axes = plt.subplots(1, 2, figsize=(9, 3.3))
    axes[0].semilogy(np.array(sensitivity["detuning_hz"]) / 1e6,
                     np.maximum(sensitivity["infidelity_vs_detuning"], 1e-16), marker=".")
    axes[0].set_xlabel("detuning offset (MHz)")
    axes[1].semilogy((np.array(sensitivity["amplitude_scale"]) - 1) * 100,
                     np.maximum(sensitivity["infidelity_vs_scale"], 1e-16), marker=".")
    axes[1].set_xlabel("amplitude error (%)")
    for ax in axes:
        ax.set_ylabel("infidelity")
        ax.grid(True, which="both", alpha=0.3)
    fig.suptitle("Sensitivity")
    _finish(fig, path)


def plot_sweep(path: Path, points: list, targets: tuple[float, float], chosen_s=None) -> None:
    """Best infidelity and leakage vs duration, with the targets and the chosen duration."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(7, 3.8))
    t = [p.duration_s * 1e9 for p in points]
    ax.semilogy(t, [max(p.infidelity, 1e-16) for p in points], "o-", label="infidelity")
    ax.semilogy(t, [max(p.leakage, 1e-16) for p in points], "s--", label="leakage")
    ax.axhline(targets[0], color="C0", linestyle=":", linewidth=0.9, label="target infidelity")
    ax.axhline(targets[1], color="C1", linestyle=":", linewidth=0.9, label="target leakage")
    if chosen_s:
        ax.axvline(chosen_s * 1e9, color="green", linewidth=0.9, label="shortest passing")
    ax.set_xlabel("duration (ns)")
    ax.set_title("Best result per duration")
    ax.legend(fontsize=8)
    _finish(fig, path)
