"""`tonicity replay` against a silent deployment: it expects no cards and checks the card log
instead (``/quality/calls/<call id>``), and says plainly when it cannot read the log."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from cds_service.cli import main
from tests.kit.conftest import live_server
from tests.kit.test_replay import THREE, _subset

SILENT = {
    "silent_services": ["sodium-workup", "sodium-order-select", "sodium-order-sign"],
    "unsafe_allow_silencing_critical": True,
}


def test_replay_checks_a_silent_service_against_the_log(tmp_path: Path, capsys: Any) -> None:
    folder = _subset(tmp_path, THREE)
    with live_server(tmp_path, auth={"required": False}, local_trial=True, alerts=SILENT) as url:
        rc = main(["replay", str(folder), "--url", url])
    out, _ = capsys.readouterr()
    assert rc == 0, out
    assert "3 matched, 0 failed" in out
    assert out.count("silent in the log:") == 3


def test_replay_finds_a_wrong_expectation_in_the_log(tmp_path: Path, capsys: Any) -> None:
    folder = _subset(tmp_path, THREE[:1], must=["vaptan-order"])
    with live_server(tmp_path, auth={"required": False}, local_trial=True, alerts=SILENT) as url:
        rc = main(["replay", str(folder), "--url", url])
    out, _ = capsys.readouterr()
    assert rc == 1 and "missing vaptan-order" in out


def test_replay_says_when_it_cannot_read_the_log(tmp_path: Path, capsys: Any) -> None:
    folder = _subset(tmp_path, THREE[:1])
    alerts = dict(SILENT, quality_page=False)
    with live_server(tmp_path, auth={"required": False}, local_trial=True, alerts=alerts) as url:
        rc = main(["replay", str(folder), "--url", url])
    out, _ = capsys.readouterr()
    assert rc == 1 and "cannot check the silent findings" in out and "HTTP 404" in out


def test_replay_counts_as_replay_traffic(tmp_path: Path, capsys: Any) -> None:
    from cds_service.store import Store
    from cds_service.store.feedback import feedback_report
    from cds_service.store.report import ReportFilter

    folder = _subset(tmp_path, THREE)
    with live_server(tmp_path, auth={"required": False}, local_trial=True) as url:
        assert main(["replay", str(folder), "--url", url]) == 0
        assert main(["replay", str(folder), "--url", url]) == 0  # never suppressed as a repeat
    capsys.readouterr()
    store = Store(f"sqlite:///{(tmp_path / 'tonicity.db').as_posix()}")
    try:
        assert feedback_report(store).findings == ()
        assert feedback_report(store, ReportFilter(include_replay=True)).findings
    finally:
        store.close()
