"""The project names no existing product of its field (helper rules, "Original work").

The names are not written here either: each word of every text file in the repository is
hashed (SHA-256, first 16 hex digits) and compared with the hashes of product names, tutorial
collections and the waveform keyword of a well-known simulator family that earlier versions
used. A word list in the clear would itself name them.
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SUFFIXES = {".py", ".md", ".toml", ".txt", ".json", ".cfg", ".ini", ".yml", ".yaml", ""}
SKIP_DIRS = {".git", ".venv", "build", "out", "__pycache__", ".pytest_cache", ".ruff_cache"}

# sha256(word)[:16] of the lower-case words that must not appear
FORBIDDEN = {
    "2552a9843c49f92b", "11b4e8389f1e31cd", "b393ae853cbbf50f", "648b4a1fdb300546",
    "58e989955f4b358f", "b5a28fbec19341f0", "85f697115c7a2a87", "4165d8f2f52e233b",
    "fc446e39afe85642", "0ea36af4e61b7244", "d2e328ee1c27b7dc", "9d8f770f1fa56083",
    "752025fd8ff1bdb6", "872d183b85dbc03b", "8e49a41b8c63bfa9",
}  # fmt: skip

WORD = re.compile(r"[a-z]+")


def _files():
    for path in ROOT.rglob("*"):
        if any(
            part in SKIP_DIRS or part.endswith(".egg-info") or part.startswith(".")
            for part in path.relative_to(ROOT).parts
        ):
            continue
        if path.is_file() and path.suffix in SUFFIXES and path.stat().st_size < 2_000_000:
            yield path


def test_no_product_names_in_the_repository():
    found = []
    for path in _files():
        try:
            text = path.read_text("utf-8").lower()
        except UnicodeDecodeError:
            continue
        for word in set(WORD.findall(text)):
            if hashlib.sha256(word.encode()).hexdigest()[:16] in FORBIDDEN:
                found.append(f"{path.relative_to(ROOT)}: {word}")
    assert not found, "product names found:\n" + "\n".join(found)


def test_the_check_can_fail():
    # the hash of a known forbidden word must be in the set (else the test proves nothing)
    assert hashlib.sha256(b"lwp"[::-1]).hexdigest()[:16] in FORBIDDEN
