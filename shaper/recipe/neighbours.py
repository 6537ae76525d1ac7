"""A chip qubit with its coupled neighbours, as recipes (README, "Chips: neighbours").

A single-qubit gate of a chip is played while the qubit's coupled neighbours sit in 0 or
1: their couplings dress its levels and shift its frequency by the static ZZ. The
neighbourhood of a qubit is the qubit (its own levels, its drive) with every transmon
coupled to it (``[gates] neighbour_levels`` levels each, no drive line of their own, a
tunable one at its idle point), the chip's couplings among them, in the dressed basis
(:mod:`shaper.physics.dressed`), the frame at the qubit's frequency. Its target is the
gate on the qubit and the identity on the neighbours (``[gate] on``), with virtual Z on
every qubit (a frame update on a neighbour is as free as on the qubit).

``[gates] neighbours`` says what the chip does with it: ``"check"`` optimises each gate
alone and plays its file again in the neighbourhood; ``"optimise"`` optimises it in the
neighbourhood and plays its file again alone. Either way a gate has both figures.

``[gates] simultaneous = true`` plays the gates of every coupled pair (and every pair with
a ``[[crosstalk]]``) at the same time on the pair, each line reaching the other qubit by
its complex amplitude ratio (:func:`read_crosstalk`; README, "Chips: simultaneous gates").

Nothing here imports JAX.
"""

from __future__ import annotations

import copy

MODES = ("check", "optimise")
NEIGHBOUR_LEVELS = 3  # enough for the static ZZ (its 0-2 levels: README, "Chips")
# the neighbourhood's verdict unless the template's [verdict] says: the rotating frame on
# one level more per transmon; the lab frame of a d = 100+ system takes minutes per file,
# so the lab-frame figure of a gate is its alone figure (README, "Chips: neighbours")
NEAR_VERDICT = {"lab_frame": "off", "extra_levels": 1}


def neighbours_of(subject: str, pairs) -> list[str]:
    """The qubits coupled to ``subject``, in the chip's order of couplings."""
    out = []
    for a, b in pairs:
        other = b if a == subject else a if b == subject else None
        if other is not None and other not in out:
            out.append(other)
    return out


def near_system(subject: str, specs: dict, couplings: list[dict], levels: int,
                transmon) -> dict | None:
    """The ``[system]`` table of ``subject``'s neighbourhood (module docstring), or None
    for a qubit without couplings. ``transmon(spec)`` is the chip's own transmon table of
    a qubit; ``couplings`` the chip's ``[[coupling]]`` tables."""
    pairs = [tuple(c["between"]) for c in couplings]
    near = neighbours_of(subject, pairs)
    if not near:
        return None
    members = [subject] + near
    transmons = [_closed(transmon(specs[subject]))]
    for name in near:
        t = _closed(transmon(specs[name]))
        t.update({"levels": levels, "driven": False})
        transmons.append(t)
    return {"model": "transmons", "basis": "dressed", "transmon": transmons,
            "coupling": [{"between": list(c["between"]), "strength": c["strength"]}
                         for c in couplings
                         if c["between"][0] in members and c["between"][1] in members]}


def _closed(transmon: dict) -> dict:
    """Without T1/T2: a neighbourhood is judged closed (the open system of d = 36 is a
    superoperator of 1296^2 per slice, gigabytes); the qubit's T1/T2 error budget comes
    from its gate alone (README, "Chips: neighbours")."""
    return {k: v for k, v in transmon.items() if k not in ("t1", "t2")}


def near_recipe(alone: dict, system: dict, subject: str) -> dict:
    """A single-qubit gate's recipe ``alone`` moved into its neighbourhood ``system``:
    the gate on ``subject``, the identity on the others, virtual Z on every qubit, the
    neighbourhood's verdict where the recipe does not set one."""
    out = copy.deepcopy(alone)
    out["system"] = copy.deepcopy(system)
    out["gate"] = {**out.get("gate", {}), "on": [subject], "virtual_z": True}
    limit = out["pulse"]["max_rabi"]
    out["pulse"]["max_rabi"] = {subject: limit} if not isinstance(limit, dict) else limit
    out["verdict"] = {**NEAR_VERDICT, **out.get("verdict", {})}
    return out


MAX_CROSSTALK = 1.0  # a line reaching a neighbour more strongly than its own qubit is a typo


def read_crosstalk(r, raw: dict, specs: dict, keys: dict) -> tuple[tuple[str, str, complex],
                                                                 ...]:
    """``[[crosstalk]]``: ``from`` (a qubit whose drive line leaks), ``to`` (the qubit it
    reaches), ``ratio = [re, im]``: the drive amplitude at ``to`` per unit at ``from``
    (both as Rabi frequencies), once per ordered pair.

    Raises:
        RecipeError: naming the chip file and the key.
    """
    out, seen = [], set()
    for where, item in r.tables(raw, "crosstalk", "crosstalk", "crosstalk", keys=keys):
        for key in ("from", "to"):
            if item.get(key) not in specs:
                r.fail(f"{where}.{key}", f"expected a qubit name of this chip, got "
                                         f"{str(item.get(key))[:60]!r}; qubits: "
                                         f"{', '.join(specs)}")
        if item["from"] == item["to"] or (item["from"], item["to"]) in seen:
            r.fail(f"{where}.to", f"{item['from']} -> {item['to']}: two different qubits, "
                                  f"once per direction")
        ratio = item.get("ratio")
        if not (isinstance(ratio, list) and len(ratio) == 2 and all(
                isinstance(x, int | float) and not isinstance(x, bool) for x in ratio)):
            r.fail(f"{where}.ratio", f"expected [real, imaginary] of the amplitude ratio, got "
                                     f"{str(ratio)[:60]!r}")
        value = complex(ratio[0], ratio[1])
        if not abs(value) <= MAX_CROSSTALK:
            r.fail(f"{where}.ratio", f"|ratio| = {abs(value):.3g}; at most {MAX_CROSSTALK:g} "
                                     f"(a line reaches its own qubit most)")
        seen.add((item["from"], item["to"]))
        out.append((item["from"], item["to"], value))
    return tuple(out)
