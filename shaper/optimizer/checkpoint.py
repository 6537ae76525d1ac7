"""Checkpoints: everything needed to continue a start exactly, written so nothing is lost.

A checkpoint is one ``.npz`` file: the arrays (parameters, best parameters, the optimiser's
state leaves) and a JSON string of the rest (iteration, best figures, stall counters,
method, seed, the recipe's sha256), with a sha256 over all of it. Writing goes through a
temporary file, fsync and rename; the previous checkpoint is kept as ``<name>.prev.npz``
and used when the newest is truncated or corrupted.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
from pathlib import Path

import numpy as np

from shaper.errors import ResultError
from shaper.io import atomic


def _digest(arrays: dict[str, np.ndarray], meta: str) -> str:
    h = hashlib.sha256(meta.encode())
    for key in sorted(arrays):
        a = np.ascontiguousarray(arrays[key])
        h.update(key.encode() + str(a.dtype).encode() + str(a.shape).encode() + a.tobytes())
    return h.hexdigest()


def save(path: str | Path, arrays: dict[str, np.ndarray], meta: dict) -> None:
    """Write a checkpoint atomically, keeping the previous one as ``.prev``."""
    path = Path(path)
    text = json.dumps(meta)
    buffer = io.BytesIO()
    np.savez(buffer, __meta__=np.array(text), __checksum__=np.array(_digest(arrays, text)),
             **arrays)
    if path.exists():
        os.replace(path, previous(path))
    atomic.write_bytes(path, buffer.getvalue())


def previous(path: Path) -> Path:
    return path.with_name(path.stem + ".prev" + path.suffix)


def _read(path: Path) -> tuple[dict[str, np.ndarray], dict]:
    with open(path, "rb") as handle, np.load(handle, allow_pickle=False) as data:
        arrays = {k: data[k] for k in data.files if not k.startswith("__")}
        text, checksum = str(data["__meta__"]), str(data["__checksum__"])
    if _digest(arrays, text) != checksum:
        raise ValueError("checksum mismatch")
    return arrays, json.loads(text)


def load(path: str | Path, recipe_sha256: str,
         problem_sha256: str | None = None) -> tuple[dict[str, np.ndarray], dict, str]:
    """The newest good checkpoint at ``path`` (or its ``.prev``), of this recipe: the same
    digest, or the same problem (``problem_sha256``: the recipe without its budgets, so a
    run continues with another --iterations, --hours or --starts).

    Returns:
        (arrays, meta, note): ``note`` says whether the previous checkpoint had to be used.

    Raises:
        ResultError: no checkpoint, both damaged, or it belongs to another recipe.
    """
    path = Path(path)
    problems = []
    for candidate, note in ((path, ""), (previous(path), "the newest checkpoint was damaged; "
                                                       "continued from the previous one")):
        if not candidate.exists():
            continue
        try:
            arrays, meta = _read(candidate)
        except Exception as exc:  # truncated zip, bad checksum, bad JSON: try the older one
            problems.append(f"{candidate.name}: {type(exc).__name__}: {exc}")
            continue
        same = meta.get("recipe_sha256") == recipe_sha256 or (
            problem_sha256 is not None and meta.get("problem_sha256") == problem_sha256)
        if not same:
            raise ResultError(f"{candidate}: this checkpoint belongs to another recipe (sha256 "
                              f"{str(meta.get('recipe_sha256'))[:12]}..., this recipe "
                              f"{recipe_sha256[:12]}...); start a new run or use the recipe "
                              f"it came from")
        return arrays, meta, note
    if problems:
        raise ResultError(f"{path}: no usable checkpoint ({'; '.join(problems)}); remove it "
                          f"to start again")
    raise ResultError(f"{path}: no checkpoint to resume from")
