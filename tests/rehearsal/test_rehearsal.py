"""The rehearsal over an invented export: what it must find, and that every way of running it
gives the same figures."""

from __future__ import annotations

import csv
import gzip
import io
from pathlib import Path
from typing import Any

import orjson
import pytest

from cds_service.cli import main
from cds_service.errors import UserError
from cds_service.rehearsal import Stopped, rehearse
from cds_service.rehearsal.export import SpoolTask, spool_file
from tests.rehearsal.conftest import options


def _figures(report: dict[str, Any]) -> dict[str, Any]:
    """The report without how it was run (engine, timing, reused partitions)."""
    return {k: v for k, v in report.items() if k != "run"}


def test_every_planted_breach_is_found_with_its_limit_set(embedded, truth) -> None:
    # Limits: 10 mmol/L in 24 h and 18 in 48 h, 8 in 24 h with a risk of osmotic
    # demyelination such as alcohol use disorder (Verbalis 2013, expert panel recommendations
    # on correction rates; Spasovski 2014 section 7), the thresholds file's keys
    # correction_limit_24h / _48h / _24h_high_risk. The generator plants one breach of each
    # kind and keeps every other rise below 4 mmol/L per 24 h.
    report, out = embedded
    planted = truth["planted_breaches"]
    assert len(planted) == 3
    assert len(report["breaches"]) == len(planted)
    expected = sorted((p["window_hours"], p["limit_set"], p["warned"]) for p in planted)
    found = sorted(
        (b["window_hours"], b["limit_set"], b["warned_before_complete"]) for b in report["breaches"]
    )
    assert found == expected
    for b in report["breaches"]:
        assert b["rise"] > b["limit"]
        assert b["card_at_detection"] == "show"
    # the case list (asked for with --cases) names exactly the planted patients
    rows = list(csv.DictReader((out / "cases.csv").open()))
    breached = {r["patient"] for r in rows if r["why"] == "correction-limit breach"}
    assert breached == {p["patient"] for p in planted}


def test_report_holds_no_patient_identifier(embedded, truth) -> None:
    _, out = embedded
    ids = [p["patient"] for p in truth["planted_breaches"]] + ["lvh-s00000", "LVH-S"]
    for name in (
        "rehearsal.json",
        "rehearsal.html",
        "rehearsal-cards.csv",
        "rehearsal-breaches.csv",
        "input-problems.csv",
    ):
        text = (out / name).read_text()
        assert not any(i in text for i in ids), name


def test_malformed_lines_are_reported_with_file_and_line(embedded, truth) -> None:
    report, out = embedded
    planted = [(m["file"], m["line"]) for m in truth["malformed_lines"]]
    assert len(planted) == 3
    listed = [(p["file"], p["line"]) for p in report["input"]["problems"]]
    assert listed == planted
    rows = list(csv.DictReader((out / "input-problems.csv").open()))
    assert [(r["file"], int(r["line"])) for r in rows] == planted
    assert "Observation.001.ndjson.gz" in (out / "rehearsal.html").read_text()


def test_spool_counts_every_line_it_cannot_use(tmp_path: Path) -> None:
    # FHIR Bulk Data Access IG: one resource per line (NDJSON); anything else is reported.
    lines = [
        b'{"resourceType": "Patient", "id": "lvh-x1"}',
        b"[1, 2]",
        b"   ",
        b'{"id": "no-type"}',
        b'{"resourceType": "Observation", "id": "o1"}',
        b'{"resourceType": "Observation", "id": "o2", "subject": {"reference": "Patient/lvh-x1"',
        b'{"resourceType": "Practitioner", "id": "dr-1"}',
        b'{"resourceType": "Observation", "id": "o3", "subject": {"reference": "Patient/lvh-x1"}}',
    ]
    source = tmp_path / "Mixed.ndjson.gz"
    with gzip.open(source, "wb") as fh:
        fh.write(b"\n".join(lines) + b"\n")
    out = spool_file(SpoolTask(0, str(source), str(tmp_path / "0.parquet")))
    assert out["lines"] == len(lines)
    assert [n for n, _ in out["problems"]] == [2, 3, 4, 5, 6]
    assert out["resources"] == {"Patient": 1, "Observation": 1}
    assert out["not_used"] == {"Practitioner": 1}
    assert "names no patient" in out["problems"][3][1]


def test_truncated_gzip_is_a_reported_problem_not_a_crash(tmp_path: Path) -> None:
    source = tmp_path / "Observation.ndjson.gz"
    body = b'{"resourceType": "Patient", "id": "lvh-x2"}\n' * 2000
    source.write_bytes(gzip.compress(body)[:-200])
    out = spool_file(SpoolTask(0, str(source), str(tmp_path / "0.parquet")))
    assert out["problems"] and "cannot be read" in out["problems"][-1][1]


def test_dask_local_cluster_gives_exactly_the_embedded_figures(embedded, export_dir, tmp_path):
    from dask.distributed import LocalCluster

    report, _ = embedded
    with LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None, scheduler_port=0
    ) as cluster:
        on_dask = rehearse(options(export_dir, tmp_path, scheduler=cluster.scheduler_address))
    assert on_dask["run"]["engine"] == "dask"
    assert _figures(on_dask) == _figures(report)
    assert orjson.dumps(_figures(on_dask)) == orjson.dumps(_figures(report))


def test_resume_skips_finished_partitions(embedded, export_dir, tmp_path) -> None:
    report, _ = embedded
    with pytest.raises(Stopped):
        rehearse(options(export_dir, tmp_path, stop_after=1))
    with pytest.raises(UserError, match="--resume"):
        rehearse(options(export_dir, tmp_path))
    with pytest.raises(UserError, match="other inputs"):
        rehearse(options(export_dir, tmp_path, resume=True, partitions=5))
    finished = [
        orjson.loads(line) for line in (tmp_path / "manifest.jsonl").read_bytes().splitlines()
    ]
    done = [line for line in finished if line["kind"] == "partition"]
    assert 1 <= len(done) < 4
    resumed = rehearse(options(export_dir, tmp_path, resume=True))
    assert resumed["run"]["partitions_reused"] == len(done)
    assert _figures(resumed) == _figures(report)
    manifest = (tmp_path / "manifest.jsonl").read_bytes().splitlines()
    parts = [orjson.loads(x)["part"] for x in manifest if b'"partition"' in x]
    assert sorted(parts) == [0, 1, 2, 3]  # each partition evaluated once in all


def test_command_line_errors_are_one_line(tmp_path: Path, capsys) -> None:
    code = main(
        [
            "rehearse",
            str(tmp_path / "missing"),
            "--from",
            "2026-01-01",
            "--to",
            "2026-01-31",
            "--out",
            str(tmp_path / "out"),
        ]
    )
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "does not exist" in err[0]
    code = main(["rehearse", str(tmp_path), "--from", "first of May", "--to", "2026-01-31"])
    assert code == 2 and "ISO 8601" in capsys.readouterr().err


def test_html_report_is_self_contained(embedded) -> None:
    _, out = embedded
    page = (out / "rehearsal.html").read_text()
    assert page.count("<svg") == 4 and page.count("<table") >= 6
    assert "http://" not in page.replace('xmlns="http://www.w3.org/2000/svg"', "")
    assert "<script" not in page and "src=" not in page
    assert "Decision support for licensed clinicians" in page
    rows = list(csv.DictReader(io.StringIO((out / "rehearsal-cards.csv").read_text())))
    assert {r["finding_code"] for r in rows} == {c["finding_code"] for c in embedded[0]["cards"]}
