"""PNG plots of a run: I/Q vs time, spectrum with the cutoff, level populations, convergence.

Figures are drawn with matplotlib's object interface on its Agg canvas: no screen is
needed and the caller's pyplot backend (a notebook's) is left alone. Each function
writes one file; ``title`` (the run, the gate and its judged figures) heads each plot.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np


def _figure(width: float, height: float, panels: int = 1):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    axes = [fig.add_subplot(1, panels, k + 1) for k in range(panels)]
    return fig, axes


def _finish(fig, path: Path, title: str | None = None, *, fit: bool = False) -> None:
    """Title, margins, plain log-axis labels, and the PNG.

    Margins are fixed in inches rather than measured (``tight_layout`` measures every tick
    label, about 0.2 s a figure), and log axes are labelled ``1e-06`` rather than with
    mathtext (parsed per label, about 0.1 s a figure), without minor ticks (each an
    artist of its own): together 1.9 s -> 0.8 s for a run's four figures. ``fit``: measure
    the labels after all (long or rotated ones).
    """
    from matplotlib.ticker import LogFormatter, NullLocator

    if title:
        fig.suptitle(title, fontsize=9)
    for ax in fig.axes:
        if ax.get_yscale() == "log":
            ax.yaxis.set_major_formatter(LogFormatter(labelOnlyBase=True))
            ax.yaxis.set_minor_locator(NullLocator())
    width, height = fig.get_size_inches()
    if fit:
        fig.tight_layout()
    else:
        lines = title.count("\n") + 1 if title else 1  # room for each line of the title
        fig.subplots_adjust(left=0.8 / width, right=1 - 0.15 / width, bottom=0.5 / height,
                            top=1 - (0.4 + 0.15 * lines) / height, wspace=0.3)
    fig.savefig(path, dpi=110)


def _integer_ticks(axis) -> None:
    from matplotlib.ticker import MaxNLocator
    axis.set_major_locator(MaxNLocator(integer=True))


def plot_waveform(path: Path, samples_hz: np.ndarray, dt: float, names, limits=None,
                  title: str | None = None, delivered: np.ndarray | None = None,
                  delivered_dt: float | None = None) -> None:
    """The DAC's held samples per control and, where the signal chain changes them (an
    IF, a mixer, the line), what reaches the chip in the drive frame (thin lines, on the
    chain's finer grid)."""
    fig, (ax,) = _figure(8, 3.8)
    t_ns = np.arange(samples_hz.shape[0] + 1) * dt * 1e9
    for k, name in enumerate(names):
        ax.stairs(samples_hz[:, k] / 1e6, t_ns, label=f"{name} (DAC)", linewidth=1.4,
                  color=f"C{k % 10}")
    if delivered is not None:
        t_fine = (np.arange(delivered.shape[0]) + 0.5) * delivered_dt * 1e9
        for k, name in enumerate(names):
            ax.plot(t_fine, delivered[:, k] / 1e6, color=f"C{k % 10}", linewidth=0.8,
                    linestyle="--", label=f"{name} at the chip")
    for lim in sorted(set(limits or [])):
        ax.axhline(lim / 1e6, color="grey", linestyle=":", linewidth=0.8)
        ax.axhline(-lim / 1e6, color="grey", linestyle=":", linewidth=0.8)
    ax.set_xlabel("time (ns)")
    ax.set_ylabel("MHz (Rabi frequency; flux: shift)")
    ax.set_title("Drive samples as held by the DAC" + (" and as the chip sees them (dashed)"
                                                        if delivered is not None else "")
                 + " (dotted: amplitude limit)", fontsize=9)
    ax.legend(loc="upper right", fontsize=8)
    _finish(fig, path, title)


def plot_spectrum(path: Path, samples_hz: np.ndarray, dt: float, channels, *,
                  cutoff_hz: dict[str, float] | None = None, markers: dict | None = None,
                  title: str | None = None, if_hz: float = 0.0) -> None:
    """Power spectrum per channel (I + iQ for I/Q channels) with the cutoff and transitions.

    ``samples_hz`` is the baseband envelope, so frequencies are relative to the drive;
    ``if_hz`` only says in the axis label where the file carries it.
    """
    fig, (ax,) = _figure(8, 3.8)
    n = samples_hz.shape[0]
    pad = max(1024, 8 * n)
    freqs = np.fft.fftshift(np.fft.fftfreq(pad, dt)) / 1e6
    for ch in channels:
        cols = list(ch.columns)
        signal = samples_hz[:, cols[0]] + (1j * samples_hz[:, cols[1]] if len(cols) == 2 else 0)
        power = np.abs(np.fft.fftshift(np.fft.fft(signal, pad))) ** 2
        ax.semilogy(freqs, power / max(power.max(), 1e-300) + 1e-16, label=ch.name)
    cutoffs = sorted(set((cutoff_hz or {}).values()))
    for k, cutoff in enumerate(cutoffs):  # one pair of lines per distinct channel cutoff
        for sign in (-1, 1):
            ax.axvline(sign * cutoff / 1e6, color="red", linestyle="--", linewidth=0.9,
                       label="bandwidth cutoff" if sign > 0 and k == 0 else None)
    for label, f in (markers or {}).items():
        ax.axvline(f / 1e6, color="purple", linestyle=":", linewidth=0.9)
        ax.text(f / 1e6, 1e-13, " " + label, rotation=90, fontsize=7, color="purple")
    span = max(4 * max(cutoffs, default=0),
               4 * max([abs(f) for f in (markers or {}).values()] or [0]),
               5 / (n * dt)) / 1e6
    ax.set_xlim(-span, span)
    ax.set_ylim(1e-14, 2)
    where = f"; the file carries it at an IF of {if_hz / 1e6:g} MHz" if if_hz else ""
    ax.set_xlabel(f"frequency of the envelope relative to the drive (MHz{where})")
    ax.set_ylabel("relative power")
    ax.set_title("Pulse spectrum (" + ("dashed: bandwidth cutoff; " if cutoffs else "")
                 + ("dotted: transitions" if markers else "") + ")", fontsize=9)
    ax.legend(loc="upper right", fontsize=8)
    _finish(fig, path, title)


FLOOR = 1e-9  # populations plot down to here: leakage at a 1e-7 target must show


def plot_populations(path: Path, populations: np.ndarray, dt: float, labels,
                     input_labels, title: str | None = None,
                     target_leakage: float | None = None) -> None:
    """One panel per computational input state: the population of every level over time,
    on a log scale down to :data:`FLOOR` (a level that never gets there is listed as
    such in the legend, so no level is hidden)."""
    count = min(len(input_labels), 4)
    fig, axes = _figure(4 * count, 3.6, count)
    t_ns = np.arange(populations.shape[1]) * dt * 1e9
    for j, ax in enumerate(axes):
        for level, label in enumerate(labels):
            curve = populations[j, :, level]
            peak = float(curve.max())
            name = f"|{label}>" if peak >= FLOOR else f"|{label}> (< 1e-9)"
            ax.semilogy(t_ns, np.maximum(curve, FLOOR / 10), label=name,
                        color=f"C{level % 10}")
        if target_leakage:
            ax.axhline(target_leakage, color="k", linestyle=":", linewidth=0.9,
                       label="leakage target")
        ax.set_title(f"start in |{input_labels[j]}>", fontsize=9)
        ax.set_xlabel("time (ns)")
        ax.set_ylim(FLOOR, 2.0)
        ax.legend(fontsize=6, loc="lower right")
    axes[0].set_ylabel("population (log scale)")
    _finish(fig, path, title)


def plot_convergence(path: Path, history: list[dict], title: str | None = None,
                     targets: tuple[float, float] | None = None) -> None:
    """The best point's total cost, infidelity and leakage per iteration, with the targets
    (dotted); the total cost dashed and on top, so it shows where it equals the
    infidelity."""
    fig, (ax,) = _figure(6, 3.8)
    it = [h["iteration"] for h in history]
    for key, label, style in (("infidelity", "infidelity", dict(color="C0", marker=".")),
                              ("leakage", "leakage", dict(color="C1", marker=".")),
                              ("cost", "total cost", dict(color="k", linestyle="--",
                                                          linewidth=1.2, zorder=3))):
        values = np.maximum([h[key] for h in history], 1e-17)
        ax.semilogy(it, values, label=label, **style)
    if targets:
        ax.axhline(targets[0], color="C0", linestyle=":", linewidth=0.9,
                   label="target infidelity")
        ax.axhline(targets[1], color="C1", linestyle=":", linewidth=0.9,
                   label="target leakage")
    ax.set_xlabel("iteration")
    ax.set_ylabel("value of the best point so far")
    _integer_ticks(ax.xaxis)
    ax.set_title("Convergence (the optimiser's own figures, in its model)", fontsize=9)
    ax.legend(fontsize=8)
    _finish(fig, path, title)


def plot_sensitivity(path: Path, sensitivity: dict, title: str | None = None,
                     target: float | None = None, members: dict | None = None) -> None:
    """Infidelity vs detuning offset and vs amplitude scale (log scale), with the target
    (dotted) and, for a robust run, the ensemble's members marked where they sit."""
    fig, axes = _figure(9, 3.6, 2)
    x_d = np.array(sensitivity["detuning_hz"]) / 1e6
    x_s = (np.array(sensitivity["amplitude_scale"]) - 1) * 100
    axes[0].semilogy(x_d, np.maximum(sensitivity["infidelity_vs_detuning"], 1e-16), marker=".",
                     label="this pulse")
    axes[0].set_xlabel("detuning offset (MHz)")
    axes[1].semilogy(x_s, np.maximum(sensitivity["infidelity_vs_scale"], 1e-16), marker=".",
                     label="this pulse")
    axes[1].set_xlabel("amplitude error (%)")
    if members:  # the optimised ensemble: where each member's offset sits on each scan
        for ax, key, scale in ((axes[0], "detuning_hz", 1e-6), (axes[1], "amplitude_scale",
                                                                 None)):
            offsets = np.array(members[key], float)
            offsets = offsets * scale if scale else (offsets - 1) * 100
            for x in sorted(set(np.round(offsets, 9))):
                ax.axvline(x, color="C2", linestyle="-.", linewidth=0.8)
            ax.plot([], [], color="C2", linestyle="-.", label="ensemble members")
    for ax in axes:
        if target:
            ax.axhline(target, color="k", linestyle=":", linewidth=0.9, label="target")
        ax.set_ylabel("infidelity")
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=7)
    _finish(fig, path, title or "Infidelity against detuning and amplitude error")


def plot_sweep(path: Path, points: list, targets: tuple[float, float], chosen_s=None,
               title: str | None = None) -> None:
    """Best infidelity and leakage vs duration, with the targets and the chosen duration."""
    fig, (ax,) = _figure(7, 4.0)
    t = [p.duration_s * 1e9 for p in points]
    ax.semilogy(t, [max(p.infidelity, 1e-16) for p in points], "o-", label="infidelity")
    ax.semilogy(t, [max(p.leakage, 1e-16) for p in points], "s--", label="leakage")
    ax.axhline(targets[0], color="C0", linestyle=":", linewidth=0.9, label="target infidelity")
    ax.axhline(targets[1], color="C1", linestyle=":", linewidth=0.9, label="target leakage")
    budget = [p for p in points if getattr(p, "total_error", None) is not None]
    if budget:  # with coherence times: the three curves of the error budget
        tb = [p.duration_s * 1e9 for p in budget]
        ax.semilogy(tb, [max(p.incoherent_error, 1e-16) for p in budget], "^-", color="C3",
                    label="incoherent error (T1/T2)")
        ax.semilogy(tb, [max(p.total_error, 1e-16) for p in budget], "D-", color="k",
                    label="total error (channel)")
        best = min(budget, key=lambda p: p.total_error)
        ax.axvline(best.duration_s * 1e9, color="k", linestyle="--", linewidth=0.9,
                   label="lowest total error")
    if chosen_s:
        ax.axvline(chosen_s * 1e9, color="green", linewidth=0.9, label="shortest passing")
    ax.set_xlabel("duration (ns)")
    ax.set_ylabel("error (best start, as exported)")
    ax.set_title("Best result per duration", fontsize=9)
    ax.legend(fontsize=8)
    _finish(fig, path, title)


def plot_textbook(path: Path, ours: dict, textbook: dict, targets: tuple[float, float],
                  title: str | None = None) -> None:
    """The optimised pulse beside the calibrated textbook ones at the same duration
    (infidelity and leakage, log scale), with the targets."""
    kinds = [("optimised", ours)] + [(k, v) for k, v in textbook.items()
                                     if isinstance(v, dict)]
    fig, (ax,) = _figure(6, 3.6)
    x = np.arange(len(kinds))
    ax.bar(x - 0.2, [max(v["infidelity"], 1e-16) for _, v in kinds], 0.4, label="infidelity")
    ax.bar(x + 0.2, [max(v["leakage"], 1e-16) for _, v in kinds], 0.4, label="leakage")
    ax.axhline(targets[0], color="C0", linestyle=":", linewidth=0.9, label="target infidelity")
    ax.axhline(targets[1], color="C1", linestyle=":", linewidth=0.9, label="target leakage")
    ax.set_yscale("log")
    ax.set_xticks(x, [k.replace("gaussian", "Gaussian").replace("drag", "DRAG")
                      for k, _ in kinds])
    ax.set_ylabel("as exported")
    ax.set_title("Against the calibrated textbook pulses of the same length", fontsize=9)
    ax.legend(fontsize=7)
    _finish(fig, path, title)


def plot_benchmark(path: Path, block: dict, title: str | None = None) -> None:
    """A predicted RB decay (:mod:`shaper.jobs.benchmarking`): the survival of ``|0>`` per
    sequence length with the fitted ``A p^m + B`` and the sampled cross-check, and beside
    it, where population leaves the qubit levels, the leaked population with its fit
    ``L (1 - lambda^m)`` (Wood and Gambetta, Phys. Rev. A 97, 032306 (2018))."""
    rb = block["rb"]
    leak = rb.get("leakage")
    fig, axes = _figure(9 if leak else 6, 3.8, 2 if leak else 1)
    m = np.array(rb["lengths"], float)
    dense = np.geomspace(m.min(), m.max(), 200)
    fit = rb["fit"]
    ax = axes[0]
    ax.errorbar(m, rb["survival"], yerr=rb["survival_error"], fmt="o", markersize=4,
                label="exact average" if rb["method"] == "exact" else "sampled mean")
    ax.plot(dense, fit["A"] * fit["p"] ** dense + fit["B"], color="k", linewidth=1,
            label=f"A p^m + B: p = {fit['p']:.6f}, B = {fit['B']:.3f}")
    check = block.get("cross_check")
    if check:
        ax.errorbar([check["length"]], [check["sampled"]], yerr=[check["standard_error"]],
                    fmt="s", color="C3", markersize=5,
                    label=f"{check['sequences']} random sequences")
    ax.set_xscale("log")
    ax.set_xlabel("Cliffords per sequence m")
    ax.set_ylabel("survival of |0" + ("0" if block.get("qubits") == 2 else "") + ">")
    ax.legend(fontsize=7)
    if leak:
        ax = axes[1]
        ax.plot(m, rb["leaked"], "o", markersize=4, label="outside the qubit levels")
        lam = 1 - leak["leakage_per_clifford"] - leak["seepage_per_clifford"]
        ax.plot(dense, leak["steady_state_leaked"] * (1 - lam ** dense), color="k",
                linewidth=1, label=f"leakage {leak['leakage_per_clifford']:.2e} per Clifford")
        ax.set_xscale("log")
        ax.set_xlabel("Cliffords per sequence m")
        ax.set_ylabel("leaked population")
        ax.legend(fontsize=7)
    epc = (f"error per Clifford {block['error_per_clifford']:.3e} "
           f"+- {block['error_per_clifford_error']:.1e}")
    _finish(fig, path, f"{title}: {epc}" if title else epc)
