"""The morning page of a chip run: plots and one self-contained HTML file.

``chip.html`` embeds its images (PNG as data URIs) and styles, so it opens from the disk
in any browser, with no server and nothing fetched. It states whether every gate met
its targets, lists the failing ones first, and shows the full table.
"""

from __future__ import annotations

import base64
import html
import time
from pathlib import Path

import numpy as np

from shaper import __version__
from shaper.io import atomic
from shaper.io.waveio import CAUTION
from shaper.jobs.gateset import BUDGET_HEAD
from shaper.jobs.plots import _figure, _finish


def write_plots(out: Path, chip, rows) -> list[Path]:
    """``chip-durations.png`` (shortest duration of each gate, per subject) and
    ``chip-errors.png`` (infidelity and leakage of each gate, log scale)."""
    if not rows:  # nothing finished yet (a budget spent before any gate): no plots
        return []
    subjects = list(dict.fromkeys(r.subject for r in rows))
    gates = list(dict.fromkeys(r.gate for r in rows))
    paths = []
    for name, what in (("chip-durations.png", "duration"), ("chip-errors.png", "error")):
        fig, (ax,) = _figure(max(6.0, 0.9 * len(subjects) + 2), 3.6)
        width = 0.8 / max(1, len(gates))
        for k, gate in enumerate(gates):
            xs, ys, leak = [], [], []
            for j, subject in enumerate(subjects):
                for r in rows:
                    if r.subject == subject and r.gate == gate:
                        xs.append(j + (k - (len(gates) - 1) / 2) * width)
                        ys.append(r.duration_s * 1e9 if what == "duration" else r.infidelity)
                        leak.append(r.leakage)
            if what == "duration":
                ax.bar(xs, ys, width=width, label=gate)
            else:
                ax.bar(xs, np.maximum(ys, 1e-12), width=width, label=f"{gate}")
                ax.plot(xs, np.maximum(leak, 1e-12), "k.", markersize=4)
        ax.set_xticks(range(len(subjects)), subjects, rotation=30, fontsize=8)
        if what == "duration":
            ax.set_ylabel("shortest duration (ns)")
        else:
            ax.set_yscale("log")
            ax.set_ylabel("judged infidelity (bars), leakage (dots)")
            targets = _targets(chip)
            if targets:
                ax.axhline(targets[0], color="C3", linestyle=":", linewidth=0.9,
                           label="target infidelity")
                ax.axhline(targets[1], color="k", linestyle=":", linewidth=0.9,
                           label="target leakage")
        ax.legend(fontsize=7, ncol=min(len(gates), 6))
        path = out / name
        _finish(fig, path, f"chip {chip.name}: durations of every gate" if what == "duration"
                else f"chip {chip.name}: judged errors of every gate (the worst of alone and "
                     f"beside its neighbours, rotating and lab frame)",
                fit=True)  # rotated gate names
        paths.append(path)
    return paths


def _targets(chip) -> tuple[float, float] | None:
    """The targets the chip's gates are judged against (the template's; the first task's
    recipe, read as every task is)."""
    if not chip.tasks:
        return None
    from shaper.recipe import load_recipe

    o = load_recipe(chip.tasks[0].recipe).optimizer
    return o.target_infidelity, o.target_leakage


QUBIT_HEAD = ["qubit", "frequency", "anharmonicity", "levels", "max Rabi", "T1", "T2",
              "spectrum"]


def qubits_given(chip) -> list[list[str]]:
    """What was given for each qubit, as the chip file wrote it (its single-qubit tasks'
    recipes carry it): one row per qubit with a single-qubit gate, the columns of
    :data:`QUBIT_HEAD`."""
    from shaper.recipe.chip_recipes import alone_recipe
    from shaper.recipe.models import level_tables

    rows = []
    for q in chip.qubits:
        try:
            alone = alone_recipe(chip, q)
        except StopIteration:  # a qubit with no single-qubit gate of its own
            continue
        table = next(iter(level_tables(alone.get("system", {})) or [{}]))
        rows.append([str(c) for c in (
            q, table.get("qubit_frequency"), table.get("anharmonicity"), table.get("levels"),
            alone.get("pulse", {}).get("max_rabi"), table.get("t1", ""), table.get("t2", ""),
            table.get("spectrum", "charge"))])
    return rows


def _qubit_table(chip) -> str:
    head = QUBIT_HEAD
    rows = ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in cells) + "</tr>"
            for cells in qubits_given(chip)]
    return (f'<table id="qubits"><thead><tr>{"".join(f"<th>{h}</th>" for h in head)}</tr>'
            f'</thead><tbody>{"".join(rows)}</tbody></table>')


def _targets_words(chip) -> str:
    targets = _targets(chip)
    return "" if targets is None else (f"Targets: infidelity &le; {targets[0]:g}, leakage "
                                       f"&le; {targets[1]:g}, judged as the chip plays each "
                                       f"file (more levels, lab frame).")


STYLE = """body{font-family:sans-serif;margin:1.5em;color:#222}
table{border-collapse:collapse;font-size:0.9em}th,td{border:1px solid #bbb;padding:3px 8px}
th{background:#eee}tr.fail td{background:#fdd}.ok{color:#060}.bad{color:#a00}
img{max-width:100%;margin:0.5em 0}.caution{border-left:4px solid #c80;padding:0.3em 0.8em}"""


def _whys(failing) -> str:
    """Why each failing gate missed and what to try (shaper.jobs.explain), as a list."""
    items = [f"<li><b>{html.escape((r.subject + ' ') if r.subject else '')}"
             f"{html.escape(r.gate)}</b>: {html.escape(r.why)}</li>" for r in failing if r.why]
    return f'<h2>Why, and what to try</h2><ul id="why">{"".join(items)}</ul>' if items else ""


def _lengthened(rows) -> str:
    """The optimised gates kept longer than the sweep's shortest passing duration, and what
    each shorter one missed where the chip plays it (shaper.jobs.chip_kept.kept), as a list."""
    items = [f"<li><b>{html.escape((r.subject + ' ') if r.subject else '')}"
             f"{html.escape(r.gate)}</b>, kept at {r.duration_s * 1e9:.4g} ns: "
             f"{html.escape(r.lengthened)}</li>" for r in rows
             if r.lengthened and not r.derived_from]
    return ('<h2>Kept longer than the sweep\'s shortest passing duration</h2><p>That one '
            'met in the sweep\'s model, not where the chip plays it.</p>'
            f'<ul id="lengthened">{"".join(items)}</ul>') if items else ""


def _pair_table(pairs) -> str:
    if not pairs:
        return ""
    rows = "".join(
        f"<tr><td>{html.escape(p['pair'])}</td><td>{html.escape(p['strength'])}</td>"
        f"<td>{html.escape(p['levels'])}</td><td>"
        + ("hybridised" if p["static_zz_hz"] is None else f"{p['static_zz_hz'] / 1e3:.1f} kHz")
        + "</td></tr>" for p in pairs)
    return ('<h2>Static ZZ of each coupled pair</h2><p>At rest, by exact diagonalisation of '
            'the pair\'s static Hamiltonian; no other neighbour is modelled.</p>'
            '<table id="pairs"><thead><tr><th>pair</th><th>coupling</th><th>levels</th>'
            f'<th>static ZZ</th></tr></thead><tbody>{rows}</tbody></table>')


def neighbours_summary(chip, rows) -> str:
    """How the single-qubit gates fare with their coupled neighbours present, against the
    template's targets, infidelity and leakage ("" when no gate was played so; README,
    "Chips: neighbours"). The figures beside the neighbours are judged: a gate over a
    target there is a miss."""
    replayed = [r for r in rows if r.neighbours_infidelity is not None]
    targets = _targets(chip)
    if not replayed or targets is None:
        return ""
    over = [r for r in replayed if beside_misses(r, targets)]
    worst = max(replayed, key=near_worst)
    tail = (f"{len(over)} of {len(replayed)} single-qubit gates miss a target there "
            f"(infidelity {targets[0]:g}, leakage {targets[1]:g}), in the rotating or the lab "
            f"frame, and so miss their targets" if over else
            f"all {len(replayed)} single-qubit gates meet the targets there (infidelity "
            f"{targets[0]:g}, leakage {targets[1]:g}), in the rotating and the lab frame")
    if over:
        tail += "; " + "; ".join(f"{r.subject} {r.gate}: {', '.join(beside_misses(r, targets))}"
                                 for r in over[:6]) + ("; ..." if len(over) > 6 else "")
    tail += f" (worst infidelity beside them: {worst.subject} {worst.gate}, " \
            f"{near_worst(worst):.2e})"
    if any(task.alone is not None for task in chip.tasks):  # neighbours = "optimise"
        return (f"Single-qubit gates optimised and judged with their coupled neighbours "
                f"present (dressed basis): {tail}. Alone, in the lab frame, for comparison; "
                f"README, \"Chips: neighbours\".")
    return (f"Judged alone and with their coupled neighbours present (dressed basis): "
            f"{tail}. The gates are optimised without their neighbours ([gates] neighbours "
            f"= \"optimise\" optimises them with); README, \"Chips: neighbours\".")


def beside_misses(row, targets) -> list[str]:
    """The figures of a gate beside its neighbours that miss a target, in words."""
    out = []
    for frame, infidelity, leakage in (
            ("rotating frame", row.neighbours_infidelity, row.neighbours_leakage),
            ("lab frame", row.neighbours_lab_infidelity, row.neighbours_lab_leakage)):
        if infidelity is not None and infidelity > targets[0]:
            out.append(f"infidelity {infidelity:.2e} ({frame})")
        if leakage is not None and leakage > targets[1]:
            out.append(f"leakage {leakage:.2e} ({frame})")
    return out


def near_worst(row) -> float:
    """A gate's infidelity beside its neighbours: the worse of the rotating frame (one level
    more) and the lab frame (worst carrier phase)."""
    return max(row.neighbours_infidelity or 0.0, row.neighbours_lab_infidelity or 0.0)


def _neighbours_words(chip, rows) -> str:
    words = neighbours_summary(chip, rows)
    targets = _targets(chip)
    bad = targets is not None and any(beside_misses(r, targets) for r in rows)
    return (f'<p class="{"bad" if bad else "ok"}" id="neighbours">{html.escape(words)}</p>'
            if words else "")


def _gate_table(rows) -> tuple[list[str], list[str]]:
    """The gates table's head and rows (failing first, as given)."""
    budget = any(r.incoherent_error is not None for r in rows)
    near = any(r.neighbours_infidelity is not None for r in rows)
    alone = any(r.alone_infidelity is not None for r in rows)
    rb = any(r.predicted_epc is not None for r in rows)
    head = ["subject", "gate", "from", "duration (ns)", "judged infidelity", "judged leakage",
            "met", "judged on", "virtual Z before / after (rad)"] + (
        [BUDGET_HEAD] if budget else []) + (
        ["with neighbours: infidelity, leakage", "with neighbours, lab frame"]
        if near else []) + (["alone: infidelity, leakage"] if alone else []) + (
        ["predicted RB: error per Clifford; interleaved r_C (bound E)"] if rb else []) + [
        "waveform"]
    lines = []
    for r in rows:
        frames = " ".join(f"{v:.3f}" for v in r.frame_before_rad) + " / " + " ".join(
            f"{v:.3f}" for v in r.frame_after_rad) if r.frame_before_rad else ""
        cells = [r.subject, r.gate, r.derived_from or "optimised", f"{r.duration_s * 1e9:.3f}",
                 f"{r.infidelity:.2e}", f"{r.leakage:.2e}",
                 "yes" if r.met else f"NO: {r.missed}", r.judged_on, frames]
        if budget:
            cells.append("" if r.incoherent_error is None else
                         f"{r.coherent_error:.2e} + {r.incoherent_error:.2e}")
        if near:
            cells.append("" if r.neighbours_infidelity is None else
                         f"{r.neighbours_infidelity:.2e}, {r.neighbours_leakage:.2e}")
            cells.append("" if r.neighbours_lab_infidelity is None else
                         f"{r.neighbours_lab_infidelity:.2e}, {r.neighbours_lab_leakage:.2e}")
        if alone:
            cells.append("" if r.alone_infidelity is None else
                         f"{r.alone_infidelity:.2e}, {r.alone_leakage:.2e}")
        if rb:
            cells.append(_rb_cell(r))
        css = "" if r.met else ' class="fail"'
        link = f'<td><a href="{html.escape(r.waveform)}">{html.escape(r.waveform)}</a></td>'
        lines.append(f"<tr{css}>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in cells)
                     + link + "</tr>")
    return head, lines


def _rb_cell(r) -> str:
    """A row's predicted RB: its subject's error per Clifford and its interleaved error."""
    if r.predicted_epc is None:
        return ""
    text = f"{r.predicted_epc:.2e}"
    if r.interleaved_error is not None:
        text += f"; {r.interleaved_error:.2e} ({r.interleaved_bound:.1e})"
    return text


def _together_table(found) -> str:
    if not found:
        return ""
    rows = "".join(
        f"<tr><td>{html.escape(e['pair'])}</td><td>{html.escape(e['gate'])}</td>"
        f"<td>{e['infidelity']:.2e}, {e['leakage']:.2e}</td>"
        f"<td>{e['own'][0]:.2e}, {e['own'][1]:.2e}</td></tr>" for e in found)
    return ('<h2>Gates played at the same time</h2><p>Both files of a pair at once on the '
            'pair (dressed basis, rotating frame), each line reaching the other qubit by its '
            'crosstalk ratio: the joint infidelity of the gate on both, and each file\'s own.'
            '</p><table id="together"><thead><tr><th>pair</th><th>gate</th><th>together: '
            'infidelity, leakage</th><th>each as judged</th></tr></thead>'
            f'<tbody>{rows}</tbody></table>')


def write_page(path: Path, chip, rows, images: list[Path], *, pairs=(),
               together=(), benchmarking: str = "") -> Path:
    """Write ``chip.html``: status, failing gates, the table, the plots, the caution;
    ``benchmarking``: the predicted RB section's HTML
    (:func:`shaper.jobs.benchmarking_report.page_section`)."""
    failing = [r for r in rows if not r.met]
    status = ("every gate met its targets" if not failing else
              f"{len(failing)} of {len(rows)} gate(s) missed their targets")
    head, lines = _gate_table(failing + [r for r in rows if r.met])
    pictures = "".join(
        f'<img alt="{html.escape(p.name)}" src="data:image/png;base64,'
        f'{base64.b64encode(p.read_bytes()).decode()}">' for p in images)
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>chip {html.escape(chip.name)}</title>
<style>{STYLE}</style></head>
<body data-gates="{len(rows)}" data-failing="{len(failing)}">
<h1>Chip {html.escape(chip.name)}</h1>
<p class="{'ok' if not failing else 'bad'}" id="status">{html.escape(status)}</p>
{_neighbours_words(chip, rows)}
<p>{len(chip.qubits)} qubit(s), {len(chip.pairs)} pair(s); written
{html.escape(time.strftime('%Y-%m-%d %H:%M:%S %z'))} by shaper {html.escape(__version__)}
from {html.escape(Path(chip.path or '').name)} (sha256 <code>{chip.sha256[:16]}</code>).
{_targets_words(chip)}</p>
<h2>Qubits</h2>
{_qubit_table(chip)}
{_pair_table(pairs)}
{_together_table(together)}
{benchmarking}
<h2>Gates</h2>
<table id="gates"><thead><tr>{''.join(f'<th>{h}</th>' for h in head)}</tr></thead>
<tbody>{''.join(lines)}</tbody></table>
{_whys(failing)}
{_lengthened(rows)}
<div id="plots">{pictures}</div>
<p class="caution">{html.escape(CAUTION)}</p>
<script>
window.addEventListener("load", function () {{
  var images = document.querySelectorAll("#plots img");
  var decoded = Array.prototype.every.call(images, function (i) {{
    return i.complete && i.naturalWidth > 0; }});
  document.body.setAttribute("data-images", decoded ? "decoded" : "broken");
}});
</script>
</body></html>
"""
    atomic.write_text(path, page)
    return path
