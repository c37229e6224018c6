"""The invented export is deterministic, and the README shows the two commands an analyst
needs (issue 16: generate or point at an export, run the rehearsal and open the report)."""

from __future__ import annotations

from pathlib import Path

from cds_service.rehearsal.synthetic import generate

README = Path(__file__).resolve().parents[2] / "README.md"


def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_same_arguments_give_byte_identical_exports(tmp_path: Path) -> None:
    a = generate(tmp_path / "a", 45, days=30, seed=3, planted_every=15, malformed=1)
    b = generate(tmp_path / "b", 45, days=30, seed=3, planted_every=15, malformed=1)
    assert a == b and len(a["planted_breaches"]) == 3
    assert _files(tmp_path / "a") == _files(tmp_path / "b")
    other = generate(tmp_path / "c", 45, days=30, seed=4, planted_every=15)
    assert other["planted_breaches"] != [] and _files(tmp_path / "c") != _files(tmp_path / "a")


def test_readme_shows_the_analysts_two_commands() -> None:
    text = README.read_text(encoding="utf-8")
    assert "python -m cds_service.rehearsal.synthetic export/" in text
    assert "tonicity rehearse export/ --from" in text and "rehearsal.html" in text
