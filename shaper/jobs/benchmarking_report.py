"""Where predicted randomized benchmarking appears: gate sets, chips, their tables and page.

:func:`gate_set_block` (a ``[gate] targets`` run) and :func:`chip_block` (every chip qubit
and pair; a gate set's sweep is a one-subject chip) play each gate's exported file again
(:class:`shaper.jobs.playback.Playback`) and predict its qubit's RB
(:mod:`shaper.jobs.benchmarking`): ``{"qubits": {name: block}, "pairs": {name: block}}``,
each block JSON-ready or ``{"skipped": why}`` (a set that cannot make every Clifford, a
pair whose qubits cannot). :func:`annotate` puts the subject's predicted error per
Clifford and each physical gate's interleaved error on the gate rows (the tables' columns);
:func:`write_block` writes ``benchmarking.json``, a decay plot per subject and a section
of the markdown summary; :func:`page_section` is the chip page's.

Two-qubit RB plays every map on the chip's own levels (the verdict's ``extra_levels``
left out): on the verdict's 6 x 6 levels a pair's T1/T2 map is built from a 1296 x 1296
superoperator per slice (a ring-5 CZ: about 350 GB; on 4 x 4 levels 14 GB,
:func:`shaper.jobs.benchmarking.check_memory`), and the sampled sequences would cost 20
times more.
"""

from __future__ import annotations

import html
from collections.abc import Callable
from pathlib import Path

from shaper.errors import InputError
from shaper.io import atomic
from shaper.physics.clifford import ROTATIONS

FILE = "benchmarking.json"
PAIR_SEQUENCES = 30      # random two-qubit sequences per length
PAIR_MAX_SECONDS = 900.0  # a two-qubit prediction estimated longer is skipped, said why


def _physical_rows(rows) -> list:
    return [r for r in rows if r.gate.strip().upper() in ROTATIONS]


def _qubit(playbacks: dict, subject: str, echo, **options) -> dict:
    from shaper.jobs.benchmarking import predict_qubit

    try:
        block = predict_qubit(playbacks, **options)
    except InputError as exc:
        echo(f"{subject}: no predicted RB: {exc}")
        return {"skipped": str(exc)}
    echo(f"{subject}: predicted error per Clifford {block['error_per_clifford']:.3e} "
         f"({block['compilation']['mean_physical_per_clifford']:.3g} pulses per Clifford, "
         f"{block['seconds']['total']:.1f} s)")
    return block


def gate_set_block(recipe, rows, out: Path, *, echo: Callable = print, **options) -> dict:
    """Predicted RB of a gate set's files (``rows`` of :func:`shaper.jobs.gateset.run_set`,
    waveforms relative to ``out``); ``options`` go to
    :func:`shaper.jobs.benchmarking.predict_qubit`."""
    from shaper.io.waveio import read_waveform
    from shaper.jobs.playback import Playback
    from shaper.recipe.derive import for_gate

    subject = recipe.system.qubit_names[0] if len(recipe.system.dims) == 1 else recipe.name
    if len(recipe.system.dims) != 1:
        block = {"skipped": "single-qubit RB needs a gate set of one transmon"}
    else:
        playbacks = {r.gate: Playback(for_gate(recipe, r.gate, samples=r.samples),
                                      read_waveform(Path(out) / r.waveform))
                     for r in _physical_rows(rows)}
        block = _qubit(playbacks, subject, echo, **options)
    out_block = {"qubits": {subject: block}, "pairs": {}}
    annotate(rows, out_block, default=subject)
    return out_block


def qubit_unit(chip, q: str, rows, root: Path, *, echo: Callable = print) -> dict | None:
    """Predicted RB of one chip qubit (its gates alone, the verdict's model): a unit of the
    chip's executor (:func:`shaper.jobs.chip.run_chip` submits it once the qubit's gates
    are made). None: the qubit has no physical single-qubit gate."""
    files = _files(chip, q, rows, root)
    return _qubit(files, q, echo) if files else None


def pair_unit(chip, a: str, b: str, rows, root: Path, *,
              echo: Callable = print) -> dict | None:
    """Predicted two-qubit RB of a pair with a pair gate (sampled, on the chip's own levels;
    the cost said first): a unit of the chip's executor. None: the pair has no gate."""
    from shaper.jobs.chip_pairs import _playback, task_of

    pair = next((r for r in rows if r.subject == f"{a}-{b}"), None)
    if pair is None:
        return None
    sets = tuple(_files(chip, q, rows, root, extra_levels=0) for q in (a, b))
    return _pair(pair, _playback(task_of(chip, pair).recipe, pair, root, extra_levels=0),
                 sets, echo)


def _files(chip, q: str, rows, root: Path, **verdict) -> dict:
    """A chip qubit's physical gates' Playbacks (alone), by gate name."""
    from shaper.jobs.chip_pairs import _playback, task_of
    return {r.gate: _playback(task_of(chip, r).alone_recipe, r, Path(root), **verdict)
            for r in _physical_rows([r for r in rows if r.subject == q])}


def chip_block(chip, rows, root: Path, *, echo: Callable = print) -> dict:
    """Predicted RB of every chip qubit and every pair with a pair gate, here (the chip's
    executor runs the same units one by one: :func:`qubit_unit`, :func:`pair_unit`)."""
    out = {"qubits": {}, "pairs": {}}
    for q in chip.qubits:
        block = qubit_unit(chip, q, rows, root, echo=echo)
        if block is not None:
            out["qubits"][q] = block
    for a, b in chip.pairs:
        block = pair_unit(chip, a, b, rows, root, echo=echo)
        if block is not None:
            out["pairs"][f"{a}-{b}"] = block
    annotate(rows, out)
    return out


def _pair(row, playback, sets: tuple[dict, dict], echo) -> dict:
    from shaper.jobs.benchmarking import predict_pair

    try:
        if not all(sets):
            raise InputError(f"a qubit of {row.subject} has no single-qubit gate")
        block = predict_pair(row.gate, playback, sets, sequences=PAIR_SEQUENCES,
                             max_seconds=PAIR_MAX_SECONDS,
                             echo=lambda text: echo(f"{row.subject}: {text}"))
    except InputError as exc:
        echo(f"{row.subject}: no predicted two-qubit RB: {exc}")
        return {"skipped": str(exc)}
    echo(f"{row.subject}: predicted two-qubit error per Clifford "
         f"{block['error_per_clifford']:.3e} +- {block['error_per_clifford_error']:.1e} "
         f"({block['seconds']['total']:.1f} s)")
    return block


def annotate(rows, block: dict, *, default: str = "") -> None:
    """Each row gains its subject's predicted error per Clifford (``predicted_epc``) and,
    for a physical gate of a benchmarked qubit, its interleaved error and bound."""
    found = {**block["qubits"], **block["pairs"]}
    for r in rows:
        mine = found.get(r.subject or default) or {}
        if "error_per_clifford" not in mine:
            continue
        r.predicted_epc = mine["error_per_clifford"]
        inter = (mine.get("interleaved") or {}).get(r.gate.strip().upper())
        if inter is not None:
            r.interleaved_error, r.interleaved_bound = inter["gate_error"], inter["bound"]


def write_block(out: Path, block: dict, markdown: str, *, plots: bool = True,
                draw=None) -> list[Path]:
    """``benchmarking.json``, ``benchmarking-<subject>.png`` per benchmarked subject (with
    ``plots``), and a section appended to ``out/markdown``. ``draw``: a painter's (else
    drawn here)."""
    from shaper.jobs.painter import draw_here
    from shaper.jobs.plots import plot_benchmark

    draw = draw or draw_here
    out = Path(out)
    atomic.write_json(out / FILE, block)
    files = [out / FILE]
    for kind in ("qubits", "pairs"):
        for subject, entry in block[kind].items():
            if plots and "error_per_clifford" in entry:
                path = out / f"benchmarking-{subject}.png"
                draw(plot_benchmark, path, entry, title=f"{subject}: predicted RB")
                files.append(path)
    md = out / markdown
    text = md.read_text() if md.exists() else ""
    atomic.write_text(md, text + "\n" + "\n".join(markdown_lines(block)) + "\n")
    return files


def _qubit_cells(subject: str, b: dict) -> list[str]:
    if "skipped" in b:
        return [subject, "skipped: " + b["skipped"]] + [""] * 6
    comp, gi, check = b["compilation"], b["gate_independent"], b["cross_check"]
    leak = b["leakage_per_clifford"]
    return [subject, f"{b['error_per_clifford']:.3e} +- {b['error_per_clifford_error']:.1e}",
            f"{gi['mean_clifford_infidelity']:.3e}", f"{gi['summed_gate_infidelities']:.3e}",
            "" if leak is None else f"{leak:.2e}",
            f"{comp['method']}, {comp['mean_physical_per_clifford']:.3g}",
            f"{b['slot']['slot_s'] * 1e9:.3f} ns",
            f"m = {check['length']}: {check['exact']:.4f} vs {check['sampled']:.4f} +- "
            f"{check['standard_error']:.4f}"]


QUBIT_HEAD = ["qubit", "predicted error per Clifford", "mean Clifford infidelity",
              "gates' infidelities summed", "leakage per Clifford",
              "compilation, pulses per Clifford", "slot", "exact vs sampled"]
PAIR_HEAD = ["pair", "gate", "predicted error per Clifford", "leakage per Clifford",
             "pair gates per Clifford", "levels", "cost stated", "seconds"]


def _pair_cells(subject: str, b: dict) -> list[str]:
    if "skipped" in b:
        return [subject, "skipped: " + b["skipped"]] + [""] * 6
    leak = b["leakage_per_clifford"]
    return [subject, b["pair_gate"],
            f"{b['error_per_clifford']:.3e} +- {b['error_per_clifford_error']:.1e}",
            "" if leak is None else f"{leak:.2e}",
            f"{b['compilation']['mean_pair_gates_per_clifford']:.3g}",
            "x".join(map(str, b["levels"])),
            f"{b['cost_stated']['estimated_seconds']:.3g} s", f"{b['seconds']['total']:.1f}"]


def _interleaved_rows(block: dict) -> list[list[str]]:
    out = []
    for subject, b in block["qubits"].items():
        for gate, i in (b.get("interleaved") or {}).items():
            out.append([subject, gate, f"{i['gate_error']:.3e}", f"{i['bound']:.2e}",
                        f"{i['gate_infidelity']:.3e}", f"{i['judged_infidelity']:.3e}",
                        f"{i['gate_leakage']:.2e}"])
    return out


INTERLEAVED_HEAD = ["qubit", "gate", "interleaved r_C", "bound E", "its map's infidelity",
                    "judged infidelity (the qubit alone)", "its map's leakage"]


def markdown_lines(block: dict) -> list[str]:
    """The summary's section: every qubit and pair, then interleaved RB per gate."""
    def table(head, rows):
        return ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)] + [
            "| " + " | ".join(r) + " |" for r in rows]
    lines = ["## Predicted randomized benchmarking", "",
             "Each gate's file as the chip plays it (the verdict's model, T1/T2 over its "
             "footprint, leakage), every pulse in one slot of the longest footprint, the "
             "Cliffords with virtual Z; the exact average fitted A p^m + B (Magesan, Gambetta "
             "and Emerson 2011). Not in it: state preparation and measurement, drift, "
             "crosstalk beyond the model (README, \"Predicted randomized benchmarking\").", ""]
    lines += table(QUBIT_HEAD, [_qubit_cells(s, b) for s, b in block["qubits"].items()])
    if block["pairs"]:
        lines += ["", "Two-qubit RB (sampled; every map on the chip's own levels):", ""]
        lines += table(PAIR_HEAD, [_pair_cells(s, b) for s, b in block["pairs"].items()])
    inter = _interleaved_rows(block)
    if inter:
        lines += ["", "Interleaved RB of each physical gate (Magesan et al. 2012), the "
                      "true error within r_C +- E:", ""]
        lines += table(INTERLEAVED_HEAD, inter)
    return lines


def page_section(block: dict | None) -> str:
    """The chip page's section (``id="benchmarking"``), empty without a block."""
    if not block or not (block["qubits"] or block["pairs"]):
        return ""

    def table(ident, head, rows):
        body = "".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>"
                       for r in rows)
        return (f'<table id="{ident}"><thead><tr>'
                + "".join(f"<th>{html.escape(h)}</th>" for h in head)
                + f"</tr></thead><tbody>{body}</tbody></table>")
    parts = ['<h2>Predicted randomized benchmarking</h2><p>Each gate\'s file as the chip '
             'plays it, every pulse in one slot of the longest footprint, the Cliffords with '
             'virtual Z; not in it: state preparation and measurement, drift, crosstalk '
             'beyond the model.</p>',
             table("benchmarking", QUBIT_HEAD,
                   [_qubit_cells(s, b) for s, b in block["qubits"].items()])]
    if block["pairs"]:
        parts.append(table("benchmarking-pairs", PAIR_HEAD,
                           [_pair_cells(s, b) for s, b in block["pairs"].items()]))
    inter = _interleaved_rows(block)
    if inter:
        parts.append(table("interleaved", INTERLEAVED_HEAD, inter))
    return "\n".join(parts)


def gate_of(spec: str) -> tuple[str, Path]:
    """``GATE=FILE``, or a FILE named ``<set>-<gate>.csv`` as a gate set exports it (the
    gate's file-safe name: ``x_half`` is X/2, ``my_half`` -Y/2); ``(gate, path)``.

    Raises:
        InputError: neither, naming the physical gates.
    """
    from shaper.physics.targets import slug

    head, sep, tail = spec.partition("=")
    if sep and head.strip().upper() in ROTATIONS:
        return head.strip().upper(), Path(tail)
    stem = Path(spec).stem
    for gate in sorted(ROTATIONS, key=lambda g: -len(slug(g))):
        if stem.endswith(f"-{slug(gate)}") or stem == slug(gate):
            return gate, Path(spec)
    raise InputError(f"{spec!r}: say which gate the file plays, as GATE=FILE (GATE one of "
                     f"{', '.join(ROTATIONS)}), or name it <set>-<gate>.csv as a gate set "
                     f"exports it")


def files_block(recipe, specs, *, echo: Callable = print, **options) -> tuple[dict, dict]:
    """``shaper benchmark``: predicted RB of the files ``specs`` (:func:`gate_of`) on the
    recipe's system (one transmon), and each file's verdict (``{gate: {"met", "missed",
    ...}}``, :meth:`shaper.costs.verdict.Verdict.as_dict`)."""
    from shaper.io.waveform_import import read_any
    from shaper.jobs.benchmarking import predict_qubit
    from shaper.jobs.playback import Playback
    from shaper.recipe.derive import for_gate

    if len(recipe.system.dims) != 1:
        raise InputError(f"{recipe.name}: single-qubit RB needs a recipe of one transmon")
    playbacks = {}
    for spec in specs:
        gate, path = gate_of(spec)
        if gate in playbacks:
            raise InputError(f"two files for {gate}: give each gate once")
        one = for_gate(recipe, gate)
        playbacks[gate] = Playback(one, read_any(path, one.system))
    block = predict_qubit(playbacks, **options)
    return block, {gate: pb.verdict().as_dict() for gate, pb in playbacks.items()}
