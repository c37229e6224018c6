"""The rehearsal's report: JSON, CSV and one self-contained HTML file for the board.

No patient identifier reaches these files: breaches are numbered, times are days of the
rehearsed range. ``--cases FILE`` writes the separate list for local chart review.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from datetime import timedelta
from html import escape
from pathlib import Path
from typing import Any

import orjson

from cds_service.clinical.findings import FINDING_DISPLAY, FindingCode
from cds_service.clinical.notes import CAUTION
from cds_service.rehearsal import svg

SEVERITIES = ("mild", "moderate", "profound")
_INDICATOR_RANK = {"critical": 0, "warning": 1, "info": 2}
MAX_LISTED_PROBLEMS = 10_000


def _quantile(sorted_values: list[float], q: float) -> float | None:
    """Nearest-rank quantile (None for no values)."""
    if not sorted_values:
        return None
    rank = max(1, math.ceil(q * len(sorted_values)))
    return sorted_values[rank - 1]


def _days(opts: Any) -> int:
    return max(1, math.ceil((opts.end - opts.start) / timedelta(days=1)))


def _day_of(iso: str, opts: Any) -> int:
    from cds_service.fhir.times import parse_datetime

    t = parse_datetime(iso)
    assert t is not None
    return int((t - opts.start) // timedelta(days=1)) + 1


def _label(code: str) -> str:
    try:
        return FINDING_DISPLAY[FindingCode(code)]
    except ValueError:
        return code


def _cards(merged: dict[str, Any], days: int, patient_days: float) -> list[dict[str, Any]]:
    rows = []
    for key in sorted(
        merged["cards"],
        key=lambda k: (_INDICATOR_RANK.get(k.split("|")[1], 3), k.split("|")[0]),
    ):
        code, indicator = key.split("|")
        counts = merged["cards"][key]
        evaluated = sum(counts.values())
        shown = counts.get("show", 0)
        per_day = sorted([merged["shown_days"].get(key, {}).get(str(d), 0) for d in range(days)])
        rows.append(
            {
                "finding_code": code,
                "finding": _label(code),
                "indicator": indicator,
                "evaluated": evaluated,
                "shown": shown,
                "suppressed": counts.get("suppressed", 0),
                "silent": counts.get("silent", 0),
                "off": counts.get("off", 0),
                "share_suppressed": round(counts.get("suppressed", 0) / evaluated, 4),
                "cards_per_100_patient_days": (
                    round(100 * shown / patient_days, 2) if patient_days else None
                ),
                "per_day_median": _quantile(per_day, 0.5),
                "per_day_p95": _quantile(per_day, 0.95),
                "patients_affected": merged["patients_shown"].get(key, 0),
            }
        )
    return rows


def _timing(minutes: list[int], never: int) -> dict[str, Any]:
    hours = [m / 60 for m in minutes]
    n = len(hours) + never
    return {
        "episodes": n,
        "measured": len(hours),
        "never_measured": never,
        "median_hours": None if not hours else round(_quantile(hours, 0.5) or 0, 1),
        "p90_hours": None if not hours else round(_quantile(hours, 0.9) or 0, 1),
        "share_within_24h": round(sum(h <= 24 for h in hours) / n, 4) if n else None,
        "done_by_hour": [sum(1 for h in hours if h <= limit) for limit in range(97)],
    }


def build(merged: dict[str, Any], read: list[dict[str, Any]], opts: Any, run: dict) -> dict:
    days = _days(opts)
    patient_days = merged["patient_seconds"] / 86400
    breaches = []
    for i, b in enumerate(merged["breaches"], start=1):
        breaches.append(
            {
                "case": f"B{i:03d}",
                "window_hours": b["window_hours"],
                "rise": b["rise"],
                "limit": b["limit"],
                "limit_set": b["limit_set"],
                "limits_24h_48h": b["limits"],
                "high_risk_reasons": b["high_risk_reasons"],
                "day_of_range": _day_of(b["rise_end"], opts),
                "rise_hours": round(
                    (_day_seconds(b["rise_end"]) - _day_seconds(b["rise_start"])) / 3600, 1
                ),
                "card_at_detection": b["detection_action"],
                "detected_minutes_after_draw": round(
                    (_day_seconds(b["detected_at"]) - _day_seconds(b["rise_end"])) / 60
                ),
                "warned_before_complete": b["warned_before"],
                "warning_lead_hours": (
                    None
                    if b["warning_lead_minutes"] is None
                    else round(b["warning_lead_minutes"] / 60, 1)
                ),
                "warning_cards_before_complete": b["warnings_before"],
                "cards_shown_before_complete": b["shown_before"],
            }
        )
    problems = [
        {"file": f["file"], "line": line, "problem": why}
        for f in read
        for line, why in f["problems"]
    ]
    episodes = {s: merged["episodes"].get(s, 0) for s in SEVERITIES}
    resources: dict[str, int] = {}
    not_used: dict[str, int] = {}
    for f in read:
        for k, n in f["resources"].items():
            resources[k] = resources.get(k, 0) + n
        for k, n in f["not_used"].items():
            not_used[k] = not_used.get(k, 0) + n
    return {
        "title": "Tonicity rehearsal over a FHIR Bulk Data export",
        "caution": CAUTION,
        "range": {"from": opts.start.isoformat(), "to": opts.end.isoformat(), "days": days},
        "configuration_sha256": _config_digest(opts.config),
        "population": {
            "patients": merged["patients"],
            "adult_patients": merged["adult_patients"],
            "patient_days": round(patient_days, 1),
            "patients_without_patient_resource": merged["patients_without_patient_resource"],
            "lines_without_patient_resource": merged["lines_without_patient_resource"],
        },
        "calls": dict(sorted(merged["calls"].items())),
        "cards": _cards(merged, days, patient_days),
        "cards_total": _total(merged, days, patient_days),
        "episodes_by_severity": episodes,
        "time_to_measured_osmolality": _timing(
            merged["osmolality_minutes"], merged["osmolality_never"]
        ),
        "time_to_urine_studies": _timing(merged["urine_minutes"], merged["urine_never"]),
        "breaches": breaches,
        "input": {
            "files": [
                {"file": f["file"], "lines": f["lines"], "problems": len(f["problems"])}
                for f in read
            ],
            "resources": dict(sorted(resources.items())),
            "not_used_resource_types": dict(sorted(not_used.items())),
            "problem_lines": len(problems),
            "problems": problems[:MAX_LISTED_PROBLEMS],
        },
        "run": run,
    }


def _total(merged: dict[str, Any], days: int, patient_days: float) -> dict[str, Any]:
    per_day = [0] * days
    for inner in merged["shown_days"].values():
        for d, n in inner.items():
            if 0 <= int(d) < days:
                per_day[int(d)] += n
    shown = sum(c.get("show", 0) for c in merged["cards"].values())
    ordered = sorted(per_day)
    return {
        "shown": shown,
        "evaluated": sum(sum(c.values()) for c in merged["cards"].values()),
        "cards_per_100_patient_days": round(100 * shown / patient_days, 2)
        if patient_days
        else None,
        "per_day_median": _quantile(ordered, 0.5),
        "per_day_p95": _quantile(ordered, 0.95),
        "per_day": per_day,
    }


def _day_seconds(iso: str) -> float:
    from cds_service.fhir.times import parse_datetime

    t = parse_datetime(iso)
    assert t is not None
    return t.timestamp()


def _config_digest(config: str | None) -> str:
    return hashlib.sha256(Path(config).read_bytes() if config else b"").hexdigest()


# ---- files ---------------------------------------------------------------------------------


def _csv(rows: list[dict[str, Any]], columns: list[str]) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for row in rows:
        w.writerow({k: ";".join(map(str, v)) if isinstance(v, list) else v for k, v in row.items()})
    return buf.getvalue()


CARD_COLUMNS = [
    "finding_code",
    "indicator",
    "evaluated",
    "shown",
    "suppressed",
    "silent",
    "off",
    "share_suppressed",
    "cards_per_100_patient_days",
    "per_day_median",
    "per_day_p95",
    "patients_affected",
]
BREACH_COLUMNS = [
    "case",
    "window_hours",
    "rise",
    "limit",
    "limit_set",
    "high_risk_reasons",
    "day_of_range",
    "rise_hours",
    "card_at_detection",
    "detected_minutes_after_draw",
    "warned_before_complete",
    "warning_lead_hours",
    "warning_cards_before_complete",
    "cards_shown_before_complete",
]


def write_all(
    built: dict[str, Any],
    merged: dict[str, Any],
    read: list[dict[str, Any]],
    out: Path,
    cases: str | None,
) -> None:
    (out / "rehearsal.json").write_bytes(orjson.dumps(built, option=orjson.OPT_INDENT_2))
    (out / "rehearsal-cards.csv").write_text(_csv(built["cards"], CARD_COLUMNS))
    (out / "rehearsal-breaches.csv").write_text(_csv(built["breaches"], BREACH_COLUMNS))
    problems = [
        {"file": f["file"], "line": line, "problem": why}
        for f in read
        for line, why in f["problems"]
    ]
    (out / "input-problems.csv").write_text(_csv(problems, ["file", "line", "problem"]))
    (out / "rehearsal.html").write_text(html(built), encoding="utf-8")
    if cases:
        rows = merged["cases"]
        Path(cases).write_text(_csv(rows, ["patient", "why", "at", "detail"]))


# ---- HTML ----------------------------------------------------------------------------------


def _table(headers: list[str], rows: list[list[Any]], caption: str) -> str:
    head = "".join(f"<th scope='col'>{escape(h)}</th>" for h in headers)
    body = "".join(
        "<tr>" + "".join(f"<td{_align(c)}>{escape(_cell(c))}</td>" for c in row) + "</tr>"
        for row in rows
    )
    return (
        f"<table><caption>{escape(caption)}</caption><thead><tr>{head}</tr></thead>"
        f"<tbody>{body}</tbody></table>"
    )


def _align(v: Any) -> str:
    """Numbers right-aligned (the default), words left-aligned."""
    numeric = isinstance(v, int | float) and not isinstance(v, bool)
    return "" if numeric or v is None else " class='t'"


def _cell(v: Any) -> str:
    if v is None:
        return "–"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:,.2f}".rstrip("0").rstrip(".") if v != int(v) else f"{int(v):,}"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, list):
        return ", ".join(map(str, v)) or "–"
    return str(v)


_STYLE = """
body{font-family:system-ui,sans-serif;color:#1f2933;max-width:1020px;margin:2rem auto;
padding:0 1rem;line-height:1.45}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{font-size:1.25rem;margin-top:2.4rem;
border-bottom:2px solid #d5dbe1;padding-bottom:.2rem}
.caution{border-left:4px solid #b54708;background:#fff8ef;padding:.6rem .9rem}
.figures{display:flex;flex-wrap:wrap;gap:.8rem;margin:1rem 0}
.figures div{border:1px solid #d5dbe1;border-radius:6px;padding:.5rem .8rem;min-width:9rem}
.figures b{display:block;font-size:1.35rem}
table{border-collapse:collapse;margin:.6rem 0 1.2rem;font-size:.9rem;width:100%}
caption{text-align:left;font-weight:600;padding:.3rem 0}
th,td{border:1px solid #d5dbe1;padding:.25rem .45rem;text-align:right}
th:first-child,td:first-child,td.t{text-align:left}
thead th{background:#f0f3f6}
svg{max-width:100%;height:auto;display:block;margin-top:.6rem}
.note{font-size:.9rem;color:#3e4c59}
"""


def html(r: dict[str, Any]) -> str:
    pop, total = r["population"], r["cards_total"]
    parts = [
        "<!doctype html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>{escape(r['title'])}</title><style>{_STYLE}</style></head><body>",
        f"<h1>{escape(r['title'])}</h1>",
        f"<p class='note'>Range {escape(r['range']['from'][:10])} to "
        f"{escape(r['range']['to'][:10])} (UTC, {r['range']['days']} days, end excluded). "
        f"Configuration SHA-256 {escape(r['configuration_sha256'][:16])}…. Figures are what the "
        "live service would have shown with this configuration, replayed on the export: a "
        "patient-view call at each new sodium result and an order-sign call at each IV fluid "
        "or checked drug order, each on the record as it stood then.</p>",
        f"<p class='caution'>{escape(r['caution'])} This report estimates alert burden and "
        "missed overcorrections before go-live; it holds no patient identifiers.</p>",
        "<div class='figures'>",
        *(
            f"<div>{escape(label)}<b>{escape(_cell(value))}</b></div>"
            for label, value in (
                ("patients", pop["patients"]),
                ("patient-days", pop["patient_days"]),
                ("cards shown", total["shown"]),
                ("per 100 patient-days", total["cards_per_100_patient_days"]),
                ("per day, median", total["per_day_median"]),
                ("per day, 95th percentile", total["per_day_p95"]),
                ("correction-limit breaches", len(r["breaches"])),
            )
        ),
        "</div>",
    ]
    parts += _section_cards(r)
    parts += _section_daily(r)
    parts += _section_episodes(r)
    parts += _section_breaches(r)
    parts += _section_timing(r)
    parts += _section_input(r)
    parts.append("</body></html>")
    return "".join(parts)


def _section_cards(r: dict[str, Any]) -> list[str]:
    rows = r["cards"]
    chart = svg.hbars(
        [
            (
                f"{c['finding_code']} ({c['indicator']})",
                c["cards_per_100_patient_days"] or 0,
                c["indicator"],
            )
            for c in rows
        ],
        "Cards shown per 100 patient-days, by finding and indicator",
        "cards per 100 patient-days",
    )
    table = _table(
        [
            "finding (code)",
            "indicator",
            "evaluated",
            "shown",
            "share suppressed",
            "per 100 patient-days",
            "per day median",
            "per day 95th pct",
            "patients affected",
        ],
        [
            [
                f"{c['finding']} ({c['finding_code']})",
                c["indicator"],
                c["evaluated"],
                c["shown"],
                f"{100 * c['share_suppressed']:.1f} %",
                c["cards_per_100_patient_days"],
                c["per_day_median"],
                c["per_day_p95"],
                c["patients_affected"],
            ]
            for c in rows
        ],
        "Cards per finding code and indicator",
    )
    calls = ", ".join(f"{n:,} {hook} calls" for hook, n in r["calls"].items()) or "no calls"
    return [
        "<h2>Alert burden</h2>",
        f"<p class='note'>Replayed {escape(calls)}. Suppressed: "
        "held back by the alert policy (repeat suppression); silent and switched-off "
        "findings are counted in the JSON and CSV.</p>",
        chart,
        table,
    ]


def _section_daily(r: dict[str, Any]) -> list[str]:
    t = r["cards_total"]
    chart = svg.daily(
        t["per_day"],
        "Cards shown per day (all findings)",
        [("median", t["per_day_median"] or 0), ("95th pct", t["per_day_p95"] or 0)],
    )
    weeks = []
    for w in range(0, len(t["per_day"]), 7):
        chunk = t["per_day"][w : w + 7]
        weeks.append([f"days {w + 1}-{w + len(chunk)}", sum(chunk), min(chunk), max(chunk)])
    table = _table(
        ["week", "cards shown", "fewest in a day", "most in a day"], weeks, "Cards shown per week"
    )
    return ["<h2>Cards per day</h2>", chart, table]


def _section_episodes(r: dict[str, Any]) -> list[str]:
    eps = r["episodes_by_severity"]
    colour = {"mild": "info", "moderate": "warning", "profound": "critical"}
    chart = svg.hbars(
        [(s, eps[s], colour[s]) for s in SEVERITIES],
        "Hyponatremic episodes by severity (nadir)",
        "episodes",
    )
    n = sum(eps.values()) or 1
    table = _table(
        ["severity", "episodes", "share"],
        [[s, eps[s], f"{100 * eps[s] / n:.1f} %"] for s in SEVERITIES],
        "Episodes (runs of consecutive low sodium, below the sodium_lower_normal threshold) "
        "starting in range, adults",
    )
    return ["<h2>Hyponatremic episodes</h2>", chart, table]


def _section_breaches(r: dict[str, Any]) -> list[str]:
    rows = r["breaches"]
    warned = sum(b["warned_before_complete"] for b in rows)
    text = (
        f"<p>{len(rows)} correction-limit breaches found; in {warned} a card warning of the "
        "rise (order safety or correction rate) was shown between the start of the rise and "
        "the result that completed the breach.</p>"
    )
    table = _table(
        [
            "case",
            "window",
            "rise (mmol/L)",
            "limit",
            "limit set",
            "high-risk reasons",
            "day",
            "over (h)",
            "card at detection",
            "detected (min after draw)",
            "warned before",
            "lead (h)",
            "warning cards before",
        ],
        [
            [
                b["case"],
                f"{b['window_hours']} h",
                b["rise"],
                b["limit"],
                b["limit_set"],
                b["high_risk_reasons"],
                b["day_of_range"],
                b["rise_hours"],
                b["card_at_detection"],
                b["detected_minutes_after_draw"],
                b["warned_before_complete"],
                b["warning_lead_hours"],
                b["warning_cards_before_complete"],
            ]
            for b in rows
        ],
        "Correction-limit breaches (case numbers, no identifiers)",
    )
    return ["<h2>Correction-limit breaches</h2>", text, table]


def _section_timing(r: dict[str, Any]) -> list[str]:
    osm, urine = r["time_to_measured_osmolality"], r["time_to_urine_studies"]
    series = []
    for label, data, colour in (
        ("measured osmolality", osm, "info"),
        ("urine studies", urine, "warning"),
    ):
        series.append((label, data["done_by_hour"], data["episodes"], colour))
    chart = svg.cumulative(
        series, "Share of episodes with the test done, by hours after the first low sodium"
    )
    table = _table(
        [
            "test",
            "episodes",
            "measured",
            "never measured",
            "median (h)",
            "90th pct (h)",
            "within 24 h",
        ],
        [
            [
                label,
                d["episodes"],
                d["measured"],
                d["never_measured"],
                d["median_hours"],
                d["p90_hours"],
                "–" if d["share_within_24h"] is None else f"{100 * d['share_within_24h']:.1f} %",
            ]
            for label, d in (
                ("measured serum osmolality", osm),
                ("urine osmolality or sodium", urine),
            )
        ],
        "Time from the first low sodium of an episode to the test (within the episode)",
    )
    return ["<h2>Time to the work-up</h2>", chart, table]


def _section_input(r: dict[str, Any]) -> list[str]:
    inp = r["input"]
    files = _table(
        ["file", "lines", "problem lines"],
        [[f["file"], f["lines"], f["problems"]] for f in inp["files"]],
        "Export files read",
    )
    shown = inp["problems"][:200]
    problems = _table(
        ["file", "line", "problem"],
        [[p["file"], p["line"], p["problem"]] for p in shown],
        f"Lines not read ({inp['problem_lines']:,}; all of them in input-problems.csv)",
    )
    unused = ", ".join(f"{k} {n:,}" for k, n in inp["not_used_resource_types"].items())
    run = r["run"]
    return [
        "<h2>Input and run</h2>",
        files,
        problems if inp["problem_lines"] else "<p>Every line was read.</p>",
        f"<p class='note'>Resources read: "
        f"{escape(', '.join(f'{k} {n:,}' for k, n in inp['resources'].items()))}."
        + (f" Resource types not used: {escape(unused)}." if unused else "")
        + f" Run: {escape(run['engine'])}, {run['workers']} workers, {run['partitions']} "
        f"partitions ({run['partitions_reused']} reused from an interrupted run), "
        f"{run['seconds']:,} s.</p>",
    ]
