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


def test_no_breach_is_planted_on_a_minor(tmp_path: Path) -> None:
    # Adults only (DESIGN.md, clinical content: under 18 one out-of-scope card and no adult
    # calculation), so a breach planted on a child could never be found; patient 1940 of the
    # default seed was such a case.
    import orjson

    truth = generate(tmp_path, 2000, days=90)
    born = {
        r["id"]: r["birthDate"]
        for r in map(orjson.loads, (tmp_path / "Patient.ndjson").read_bytes().splitlines())
    }
    assert len(truth["planted_breaches"]) == 50
    assert all(born[b["patient"]] < "2007-01-01" for b in truth["planted_breaches"])
    assert any(b > "2008-01-01" for b in born.values())  # the minors are still there
