"""Terminal text the commands share: the lines about a report's trust, line and mixer
blocks."""

from __future__ import annotations


def trust_summary(trust: dict | None, own: dict | None = None) -> list[str]:
    """Every model's figures of the file, from the optimiser's to the most faithful, and
    which the verdict is judged on (a report's or a check's ``trust`` block). ``own``: the
    optimiser's own figures of its samples (a report's ``before_quantisation``), with the
    model it used (the recipe's, or after an escalation the last it went on in)."""
    if not trust:
        return []
    out = [f"  model: {trust['model']}"] if trust.get("model") else []
    if own and own.get("model"):
        out.append(f"  the optimiser's own figures, {own['model']}, before export: "
                   f"infidelity {own['infidelity']:.3e}, leakage {own['leakage']:.3e}")
    rot = trust["rotating_frame"]
    out.append(f"  rotating frame, {'x'.join(map(str, rot['levels']))} levels (the recipe's "
               f"levels): infidelity {rot['infidelity']:.3e}, leakage {rot['leakage']:.3e}")
    more = trust.get("more_levels")
    if more:
        out.append(f"  rotating frame, {'x'.join(map(str, more['levels']))} levels: "
                   f"infidelity {more['infidelity']:.3e}, leakage {more['leakage']:.3e}")
    second = trust.get("second_order")
    if second:
        out.append(f"  lab frame to second order (worst carrier phase): infidelity "
                   f"{second['infidelity']:.3e}, leakage {second['leakage']:.3e}")
    lab = trust.get("lab_frame")
    if lab:
        phases = len(lab["phases_rad"])
        spread = (f" (best carrier phase {lab['infidelity_best']:.3e})" if phases > 1 else "")
        out.append(f"  lab frame, no rotating-wave approximation, "
                   f"{'x'.join(map(str, lab['levels']))} levels: infidelity "
                   f"{lab['infidelity']:.3e}, leakage {lab['leakage']:.3e}{spread}")
    stairs = trust.get("staircase")
    if stairs:
        out.append(f"  the same file from an instrument with no output filter (a bound): "
                   f"infidelity {stairs['infidelity']:.3e}, leakage {stairs['leakage']:.3e}")
    out.append(f"  judged on: {trust['judged_on']}")
    return out


def line_summary(line: dict | None, mixer: dict | None = None) -> list[str]:
    """The lines the commands print about the line and mixer blocks of a report."""
    out = []
    if line:
        w, wo = line["with_line"], line["without_line"]
        how = "pre-distorted at export" if line["predistorted"] else (
            "in the loop" if line["in_the_loop"] else "not corrected")
        out.append(f"  through the line model ({how}): infidelity {w['infidelity']:.3e}, "
                   f"leakage {w['leakage']:.3e}; the same file on an ideal line: "
                   f"{wo['infidelity']:.3e}, {wo['leakage']:.3e}")
        if line["predistorted"]:
            out.append(f"  pre-distortion residual {line['predistortion_residual']:.2e} of the "
                       f"peak (the line's output against the intended samples)")
    if mixer:
        u = mixer["uncorrected"]
        out.append(f"  mixer corrected in the samples; uncorrected it would give infidelity "
                   f"{u['infidelity']:.3e}, leakage {u['leakage']:.3e}")
    return out


def explanation_lines(report: dict) -> list[str]:
    """A missed report's ``explanation`` (shaper.jobs.explain): why, then what to run next;
    the last lines a command prints."""
    out = []
    for reason in report.get("explanation") or []:
        out += [f"why: {reason['why']}", f"next: {reason['next']}"]
    return out


def judged_line(name: str, report: dict, what: str = "") -> str:
    """The headline of a judged file: its judged figures and what they are."""
    return (f"{name}: judged infidelity {report['infidelity']:.3e}, leakage "
            f"{report['leakage']:.3e}{what} ({report.get('judged_on') or 'as exported'})")


def coherence_lines(open_system: dict | None, target: float | None = None) -> list[str]:
    """With T1/T2 given: the coherence times and the error budget (the pulse's own error
    and what decay and dephasing add), as a report's ``open_system`` holds them; with the
    infidelity ``target``, a line when decoherence alone puts the channel over it (the
    verdict judges the pulse, which T1/T2 do not change)."""
    if not open_system:
        return []
    times = ", ".join(
        f"{q}: " + " ".join(f"{k[:2].upper()} {v * 1e6:g} us" for k, v in t.items()
                            if v is not None)
        for q, t in (open_system.get("coherence_times") or {}).items())
    over = open_system.get("over")
    span = "" if not over else (
        f" over the footprint, {over['footprint_s'] * 1e9:.4g} ns: the file's "
        f"{over['file_s'] * 1e9:.4g} ns (its padding included) and the output's "
        f"{over['ring_down_s'] * 1e9:.4g} ns ring-down")
    channel = "; the channel minus the closed system, both in the rotating frame on the " \
        "recipe's levels" if open_system.get("channel") else ""
    return [f"  with decoherence: infidelity {open_system['infidelity']:.3e} = coherent "
            f"{open_system['coherent_error']:.3e} (the pulse, as judged) + incoherent "
            f"{open_system['incoherent_error']:.3e} (T1/T2{': ' + times if times else ''}"
            f"{span}{channel}); leakage {open_system['leakage']:.3e}"] + (
        [f"  note: the verdict judges the pulse (closed system); with T1/T2 the channel's "
         f"infidelity {open_system['infidelity']:.3e} is over the target {target:g}. That "
         f"floor is set by the coherence times and the gate's length (a shorter gate lowers "
         f"it), not by the pulse's shape"]
        if target is not None and open_system["infidelity"] > target else [])
