"""No merge-conflict markers in any tracked text file (common practice: a marker that slips
into a commit turns a document or a data file into something no reader should trust)."""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
MARKERS = ("<<<<<<< ", ">>>>>>> ")


def _tracked() -> list[Path]:
    try:
        out = subprocess.run(
            ["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True
        ).stdout
    except (OSError, subprocess.CalledProcessError):
        pytest.skip("not a git checkout")
    return [ROOT / name for name in out.splitlines()]


def test_no_file_holds_a_conflict_marker() -> None:
    bad = []
    for path in _tracked():
        if (
            path.suffix
            not in {
                ".py",
                ".md",
                ".toml",
                ".json",
                ".html",
                ".js",
                ".css",
                ".yaml",
                ".yml",
                ".txt",
                ".cfg",
                ".ini",
                "",
            }
            or not path.is_file()
        ):
            continue
        try:
            text = path.read_text(encoding="utf-8")
        except (UnicodeDecodeError, OSError):
            continue
        for n, line in enumerate(text.splitlines(), 1):
            if line.startswith(MARKERS) or line == "=======":
                bad.append(f"{path.relative_to(ROOT)}:{n}")
    assert not bad, bad
