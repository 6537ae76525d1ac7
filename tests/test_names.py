"""The example names we ship are neutral and our own: no bundled recipe, chip, result folder,
document, test or line of code names a chip after a bird (a hardware maker names its
processors so) or after a plant or tree (a family of names too)."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

# the names the bundled chips and recipes once carried
OLD = re.compile(r"\b(wren|kestrel|larkspur|alder|tamarind)\b", re.IGNORECASE)

SKIP_DIRS = {".git", "__pycache__", ".pytest_cache", ".ruff_cache", "runs", "build", "dist"}


def _shipped() -> list[Path]:
    out = []
    for path in ROOT.rglob("*"):
        parts = set(path.relative_to(ROOT).parts)
        if parts & SKIP_DIRS or any(p.endswith(".egg-info") for p in parts):
            continue
        if path == Path(__file__):
            continue
        out.append(path)
    return out


def test_no_shipped_file_or_folder_is_named_after_the_old_chips():
    named = [str(p.relative_to(ROOT)) for p in _shipped() if OLD.search(p.name)]
    assert not named, named
    assert (ROOT / "recipes" / "chips" / "ring-5.toml").is_file()
    assert (ROOT / "recipes" / "chips" / "ladder-12.toml").is_file()
    assert (ROOT / "results" / "ring-5").is_dir() and (ROOT / "results" / "ladder-12").is_dir()


def test_no_shipped_text_mentions_the_old_names():
    found = []
    for path in _shipped():
        if not path.is_file() or path.suffix in {".png", ".npz", ".npy"}:
            continue
        try:
            text = path.read_text()
        except UnicodeDecodeError:
            continue
        found += [f"{path.relative_to(ROOT)}:{text.count(chr(10), 0, m.start()) + 1}: "
                  f"{m.group(0)}" for m in OLD.finditer(text)]
    assert not found, found[:20]


def test_the_chips_are_named_as_their_files():
    from shaper.recipe.chip import load_chip

    for name in ("ring-5", "ladder-12"):
        assert load_chip(ROOT / "recipes" / "chips" / f"{name}.toml").name == name
