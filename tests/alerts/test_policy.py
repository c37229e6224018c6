"""The alert policy (cds_service/alerts/policy.py): repeat suppression, overrides, critical
cards, per-finding settings and silent mode, as a pure function.

The rules are ours (issue 15 of this project); the windows and caps are `common practice`
(cds_service/alerts/data/alerts.toml says why). Each rule is checked at its boundary on both
sides, and with hypothesis where it has a law.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from types import SimpleNamespace

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.alerts.policy import (
    AlertSettings,
    Quiet,
    Shown,
    data,
    decide,
    inputs_digest,
    latest_per_kind,
)
from cds_service.alerts.reasons import quiet_for_override, reason_displays
from cds_service.clinical.findings import Finding, FindingCode, InputUsed, Urgency, Value, ValueName
from cds_service.config import AlertsConfig
from cds_service.errors import UserError

T0 = datetime(2026, 3, 4, 9, 0, tzinfo=UTC)
SERVICE = "sodium-workup"
DEFAULT = AlertSettings.default()


def finding(
    code: FindingCode = FindingCode.DRUG_ASSOCIATED,
    urgency: Urgency = Urgency.INFO,
    sodium: float = 128.0,
    result_id: str = "Observation/na-1",
) -> Finding:
    return Finding(
        code=code,
        urgency=urgency,
        summary="Invented summary for a test",
        values=(Value(ValueName.SERUM_SODIUM, sodium),),
        inputs=(InputUsed("Serum sodium", sodium, "mmol/L", T0, result_id),),
    )


def one(f: Finding, history=(), quiets=(), settings=DEFAULT, now=T0, service=SERVICE):
    (d,) = decide(
        [f],
        service_id=service,
        history=list(history),
        quiets=list(quiets),
        settings=settings,
        now=now,
    )
    return d


def shown(f: Finding, at: datetime, *, silent: bool = False) -> Shown:
    return Shown(f.code.value, f.urgency.value, inputs_digest(f), at, silent)


def override(reason: str, f: Finding, indicator: str, *, digest: bool = True) -> Quiet | None:
    """The quiet a clinician's override of ``f`` with ``reason`` gives, given at T0."""
    return quiet_for_override(
        reason,
        code=f.code.value,
        indicator=indicator,
        inputs_digest=inputs_digest(f) if digest else None,
        settings=DEFAULT,
        at=T0,
    )


def settings_of(**alerts) -> AlertSettings:
    return AlertSettings.from_config(AlertsConfig(**alerts))


# --- repeat suppression --------------------------------------------------------------------


def test_first_showing_is_shown() -> None:
    d = one(finding())
    assert d.action == "show" and "first" in d.why


def test_five_opens_in_an_hour_show_an_unchanged_card_once() -> None:
    """Issue 15, "Done when": five chart opens within an hour, one card."""
    f = finding()
    history: list[Shown] = []
    actions = []
    for minutes in (0, 12, 24, 36, 48):
        d = one(f, history, now=T0 + timedelta(minutes=minutes))
        actions.append(d.action)
        if d.seen:
            history.append(shown(f, T0 + timedelta(minutes=minutes)))
    assert actions == ["show", "suppressed", "suppressed", "suppressed", "suppressed"]


def test_window_boundary_both_sides() -> None:
    """The window is half-open: hidden at window - 1 s, shown again at the window."""
    f = finding(FindingCode.DRUG_ASSOCIATED)
    window = DEFAULT.rule(f.code.value).window
    assert window == timedelta(hours=data()["finding"]["drug-associated"]["window_hours"])
    history = [shown(f, T0)]
    assert one(f, history, now=T0 + window - timedelta(seconds=1)).action == "suppressed"
    later = one(f, history, now=T0 + window)
    assert later.action == "show" and "window passed" in later.why


@given(
    sodium=st.floats(110, 134, allow_nan=False).map(lambda v: round(v, 1)),
    delta=st.floats(0.1, 10).map(lambda v: round(v, 1)),
    minutes=st.integers(0, 11 * 60),
)
def test_a_changed_result_shows_at_once(sodium: float, delta: float, minutes: int) -> None:
    """Law: within the window, the same inputs are hidden and any changed value is shown."""
    f = finding(FindingCode.HYPOTONIC, sodium=sodium)
    history = [shown(f, T0)]
    now = T0 + timedelta(minutes=minutes)
    assert one(f, history, now=now).action == "suppressed"
    newer = finding(
        FindingCode.HYPOTONIC, sodium=round(sodium + delta, 1), result_id="Observation/na-2"
    )
    d = one(newer, history, now=now)
    assert d.action == "show" and "results changed" in d.why


def test_a_new_result_with_the_same_value_shows_at_once() -> None:
    """A new sodium result (new id) is news even when its value is the same."""
    history = [shown(finding(), T0)]
    assert (
        one(finding(result_id="Observation/na-2"), history, now=T0 + timedelta(minutes=5)).action
        == "show"
    )


def test_higher_indicator_shows_lower_or_same_stays_hidden() -> None:
    f_info = finding(urgency=Urgency.INFO)
    f_warn = finding(urgency=Urgency.WARNING)
    now = T0 + timedelta(minutes=5)
    assert one(f_warn, [shown(f_info, T0)], now=now).action == "show"
    assert one(f_info, [shown(f_warn, T0)], now=now).action == "suppressed"


def test_suppression_off_shows_every_time() -> None:
    f = finding()
    assert one(f, [shown(f, T0)], settings=settings_of(suppression=False)).action == "show"


# --- critical cards ------------------------------------------------------------------------


@given(st.lists(st.integers(0, 600), max_size=20))
def test_critical_is_never_suppressed_merely_because_shown(minutes: list[int]) -> None:
    """Law: whatever was shown before, a critical card without an override is shown."""
    f = finding(FindingCode.CORRECTION_RATE, Urgency.CRITICAL)
    history = [shown(f, T0 - timedelta(minutes=m)) for m in minutes]
    d = one(f, history)
    assert d.action == "show" and "critical" in d.why


def test_managed_quiet_on_a_critical_card_is_capped_both_sides() -> None:
    f = finding(FindingCode.CORRECTION_RATE, Urgency.CRITICAL)
    q = override("already-being-managed", f, "critical")
    cap = DEFAULT.critical_quiet_max
    assert q is not None and q.until == T0 + min(DEFAULT.managed_quiet, cap)
    assert one(f, quiets=[q], now=T0 + cap - timedelta(seconds=1)).action == "suppressed"
    assert one(f, quiets=[q], now=T0 + cap).action == "show"


def test_an_unbounded_quiet_never_hides_a_critical_card() -> None:
    f = finding(FindingCode.CORRECTION_RATE, Urgency.CRITICAL)
    forever = Quiet(f.code.value, "not-applicable", None, inputs_digest(f), "critical", None)
    assert one(f, quiets=[forever]).action == "show"


def test_a_stored_quiet_longer_than_the_cap_is_cut_at_the_cap() -> None:
    """The cap holds at decision time too (a quiet written under a looser setting)."""
    f = finding(FindingCode.CORRECTION_RATE, Urgency.CRITICAL)
    long = Quiet(
        f.code.value, "already-being-managed", T0 + timedelta(days=2), None, "critical", T0
    )
    cap = DEFAULT.critical_quiet_max
    assert one(f, quiets=[long], now=T0 + cap - timedelta(seconds=1)).action == "suppressed"
    assert one(f, quiets=[long], now=T0 + cap).action == "show"


# --- override reasons ------------------------------------------------------------------------


def test_not_applicable_hides_until_the_inputs_change() -> None:
    f = finding()
    q = override("not-applicable", f, "info")
    assert q is not None and q.until is None
    far = T0 + timedelta(days=30)  # long after any window: still hidden
    assert one(f, [], [q], now=far).action == "suppressed"
    assert one(finding(sodium=127.0), [], [q], now=far).action == "show"


def test_a_higher_indicator_lifts_an_override() -> None:
    f = finding(urgency=Urgency.INFO)
    q = override("not-applicable", f, "info")
    assert one(finding(urgency=Urgency.WARNING), quiets=[q]).action == "show"


def test_managed_quiet_boundary_on_a_warning_card() -> None:
    f = finding(FindingCode.DRUG_ORDER_RISK, Urgency.WARNING)
    q = override("already-being-managed", f, "warning", digest=False)
    end = T0 + DEFAULT.managed_quiet
    assert one(f, quiets=[q], now=end - timedelta(seconds=1)).action == "suppressed"
    assert one(f, quiets=[q], now=end).action == "show"


def test_record_only_and_missing_reasons_hide_nothing() -> None:
    for reason in (None, "other", "benefit-outweighs-risk"):
        assert (
            quiet_for_override(
                reason,
                code="drug-associated",
                indicator="warning",
                inputs_digest="d",
                settings=DEFAULT,
                at=T0,
            )
            is None
        )


def test_reason_displays_say_what_each_does() -> None:
    warning = dict(reason_displays("warning", DEFAULT))
    assert warning["already-being-managed"].endswith("hide this card for 8 h")
    assert "until the results change" in warning["not-applicable"]
    critical = dict(reason_displays("critical", DEFAULT))
    assert critical["already-being-managed"].endswith("for 4 h")  # capped
    assert "at most 4 h" in critical["not-applicable"]


# --- per-finding settings and silent mode ----------------------------------------------------


def test_off_and_silent_findings() -> None:
    s = settings_of(
        findings={"drug-associated": {"mode": "off"}, "endocrine-screen": {"mode": "silent"}}
    )
    assert one(finding(FindingCode.DRUG_ASSOCIATED), settings=s).action == "off"
    d = one(finding(FindingCode.ENDOCRINE_SCREEN), settings=s)
    assert d.action == "silent" and d.would_show and "would have been shown" in d.why


def test_silent_history_never_hides_a_card_after_go_live() -> None:
    """A card kept back in silent mode was never seen: once live, it is shown."""
    f = finding()
    history = [shown(f, T0, silent=True)]
    now = T0 + timedelta(minutes=5)
    assert one(f, history, now=now).action == "show"
    silent = settings_of(findings={"drug-associated": {"mode": "silent"}})
    d = one(f, history, settings=silent, now=now)
    assert d.action == "silent" and not d.would_show and "would be repeat" in d.why


def test_silent_service_needs_the_loud_key_and_then_silences_everything() -> None:
    with pytest.raises(UserError, match="unsafe_allow_silencing_critical"):
        settings_of(silent_services=[SERVICE])
    s = AlertSettings.from_config(
        AlertsConfig(silent_services=[SERVICE], unsafe_allow_silencing_critical=True), [SERVICE]
    )
    for f in (finding(), finding(FindingCode.CORRECTION_RATE, Urgency.CRITICAL)):
        assert one(f, settings=s).action == "silent"
    assert one(finding(), settings=s, service="sodium-order-sign").action == "show"
    with pytest.raises(UserError, match="no service"):
        AlertSettings.from_config(
            AlertsConfig(silent_services=["nope"], unsafe_allow_silencing_critical=True), [SERVICE]
        )


@pytest.mark.parametrize("change", [{"mode": "silent"}, {"mode": "off"}, {"lower_to": "info"}])
def test_findings_that_can_be_critical_need_the_loud_key(change: dict) -> None:
    with pytest.raises(UserError, match="unsafe_allow_silencing_critical"):
        settings_of(findings={"correction-rate-exceeded": change})
    settings_of(findings={"correction-rate-exceeded": change}, unsafe_allow_silencing_critical=True)


def test_runtime_guard_keeps_an_unexpected_critical_card_live() -> None:
    """A code not marked can-be-critical that arrives critical is still never silenced."""
    s = settings_of(findings={"drug-order-risk": {"mode": "silent", "lower_to": "info"}})
    d = one(finding(FindingCode.DRUG_ORDER_RISK, Urgency.CRITICAL), settings=s)
    assert (d.action, d.indicator) == ("show", "critical")


def test_raise_and_lower_indicator() -> None:
    s = settings_of(
        findings={"drug-associated": {"raise_to": "warning"}, "vaptan-order": {"lower_to": "info"}}
    )
    assert one(finding(FindingCode.DRUG_ASSOCIATED), settings=s).indicator == "warning"
    assert one(finding(FindingCode.VAPTAN_ORDER, Urgency.WARNING), settings=s).indicator == "info"
    with pytest.raises(UserError, match="together"):
        settings_of(findings={"drug-associated": {"raise_to": "warning", "lower_to": "info"}})


def test_unknown_finding_code_is_refused() -> None:
    with pytest.raises(UserError, match="not a finding code"):
        settings_of(findings={"hyponatremia-everything": {"mode": "off"}})


def test_configured_window_wins_over_the_data_file() -> None:
    s = settings_of(findings={"drug-associated": {"window_hours": 2}})
    f = finding()
    assert one(f, [shown(f, T0)], settings=s, now=T0 + timedelta(hours=2)).action == "show"


def test_digest_reports_what_is_live() -> None:
    assert DEFAULT.digest == AlertSettings.default().digest
    assert settings_of(scope="patient-and-user").digest != DEFAULT.digest
    assert len(DEFAULT.digest) == 16


# --- the inputs digest and the data file ----------------------------------------------------


@given(st.permutations(["Observation/a", "Observation/b", "Observation/c"]))
def test_digest_ignores_the_order_of_inputs(order: list[str]) -> None:
    base = [InputUsed("x", 1.0, "mmol/L", T0, rid) for rid in sorted(order)]
    shuffled = [InputUsed("x", 1.0, "mmol/L", T0, rid) for rid in order]
    a = Finding(FindingCode.SIADH_PATTERN, Urgency.INFO, "s", inputs=tuple(base))
    b = Finding(FindingCode.SIADH_PATTERN, Urgency.INFO, "s", inputs=tuple(shuffled))
    assert inputs_digest(a) == inputs_digest(b)


def test_a_new_drafted_order_changes_the_digest() -> None:
    a = Finding(
        FindingCode.HYPOTONIC_FLUID_ORDER, Urgency.WARNING, "s", remove_draft="MedicationRequest/a"
    )
    b = Finding(
        FindingCode.HYPOTONIC_FLUID_ORDER, Urgency.WARNING, "s", remove_draft="MedicationRequest/b"
    )
    assert inputs_digest(a) != inputs_digest(b)


def test_data_file_entries_carry_reason_and_source() -> None:
    table = data()
    for name, entry in [("defaults", table["defaults"]), *table["finding"].items()]:
        assert entry["reason"] and entry["source"] == "common practice", name
        assert entry["from_memory"] is True, name
        assert entry.get("window_hours", 1) > 0
    codes = {c.value for c in FindingCode}
    assert set(table["finding"]) <= codes
    # The clinical core's critical findings (tonicity.py: profound sodium; correction.py).
    for code in (
        "correction-rate-exceeded",
        "hypotonic-hyponatremia",
        "hyponatremia-tonicity-unknown",
    ):
        assert table["finding"][code]["can_be_critical"] is True


def test_from_settings_reads_the_alerts_section() -> None:
    s = AlertSettings.from_settings(SimpleNamespace(alerts=AlertsConfig(scope="patient-and-user")))
    assert s.scope == "patient-and-user"


# --- the cut history the store reads ---------------------------------------------------------

_CODES = (FindingCode.HYPOTONIC, FindingCode.DRUG_ASSOCIATED, FindingCode.OSMOLAL_GAP)
_histories = st.lists(
    st.builds(
        lambda code, urgency, sodium, minutes, silent: shown(
            finding(code, urgency, sodium), T0 + timedelta(minutes=minutes), silent=silent
        ),
        st.sampled_from(_CODES),
        st.sampled_from(list(Urgency)),
        st.sampled_from((121.0, 127.0)),
        st.integers(-30 * 60, 30),  # mostly before now, some after it (a clock running ahead)
        st.booleans(),
    ),
    max_size=40,
)


@given(
    history=_histories,
    asked=st.lists(
        st.tuples(
            st.sampled_from(_CODES), st.sampled_from(list(Urgency)), st.sampled_from((121.0, 127.0))
        ),
        min_size=1,
        max_size=3,
        unique_by=lambda t: t[0],
    ),
    suppression=st.booleans(),
    silent_service=st.booleans(),
)
def test_the_cut_history_gives_the_same_decisions(
    history: list[Shown],
    asked: list[tuple[FindingCode, Urgency, float]],
    suppression: bool,
    silent_service: bool,
) -> None:
    """Law: decide() on latest_per_kind(history) equals decide() on the whole history, the
    reasons' wording included (the store reads only the cut form: store.cards.recent)."""
    settings = settings_of(suppression=suppression)
    service = SERVICE
    if silent_service:
        settings = settings_of(
            suppression=suppression,
            silent_services=[SERVICE],
            unsafe_allow_silencing_critical=True,
        )
    findings = [finding(code, urgency, sodium) for code, urgency, sodium in asked]

    def decisions(h: list[Shown]) -> list:
        return decide(findings, service_id=service, history=h, quiets=[], settings=settings, now=T0)

    cut = latest_per_kind(history, T0)
    assert decisions(cut) == decisions(history)
    assert len(cut) <= len(history)
    kinds = {(h.code, h.indicator, h.inputs_digest, h.silent, h.at <= T0) for h in history}
    assert len(cut) == len(kinds)
