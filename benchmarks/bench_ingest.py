"""Ingest speed: build_context on a bundle of N Observations (default 5,000). Prints JSON.

    .venv/bin/python benchmarks/bench_ingest.py [--n 5000] [--repeat 5]

"cold_seconds" includes first use of pint/ucumvert and the fhir.resources models (once per
process; ``cds_service.fhir.warm_up()`` pays it at start-up); "warm_*" are later calls, which
is what a running service sees per request. Two bundles are timed: "typical" (values repeat
as real results do, each resource carries a narrative and reference range Tonicity does not
read) and "all_distinct" (every value unique: no two Observations share a validation).
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
from datetime import UTC, datetime, timedelta
from typing import Any

from cds_service.config import IngestSettings
from cds_service.fhir import build_context

NOW = datetime(2026, 11, 30, 12, tzinfo=UTC)
_KINDS = [  # (LOINC, value, unit as record systems send it)
    ("2951-2", 128, "mEq/L"),
    ("2947-0", 127, "mmol/L"),
    ("2345-7", 110, "mg/dl"),
    ("14749-6", 6.1, "mmol/L"),
    ("3094-0", 18, "mg/dL"),
    ("22664-7", 6.4, "mmol/L"),
    ("2692-2", 262, "mOsm/kg H2O"),
    ("2823-3", 4.1, "mmol/L"),
    ("29463-7", 154, "lb"),
    ("85354-9", 120, "mm[Hg]"),  # not mapped: filtered before validation
]


def make_bundle(n: int, *, distinct: bool = False) -> dict[str, Any]:
    entries = []
    for i in range(n):
        code, value, unit = _KINDS[i % len(_KINDS)]
        step = (i // len(_KINDS)) % 9 - 4  # typical: a handful of repeating values
        value = value * (1 + i / (20 * n)) if distinct else round(value * (1 + step / 100), 1)
        when = NOW - timedelta(minutes=7 * i)
        resource: dict[str, Any] = {
            "resourceType": "Observation",
            "id": f"bench-{i}",
            "status": "final",
            "code": {"coding": [{"system": "http://loinc.org", "code": code}]},
            "subject": {"reference": "Patient/lvh-bench"},
            "effectiveDateTime": when.isoformat(),
            "valueQuantity": {"value": round(value, 6), "unit": unit},
        }
        if not distinct:
            resource["text"] = {
                "status": "generated",
                "div": f'<div xmlns="http://www.w3.org/1999/xhtml">{code}: {value} {unit}</div>',
            }
            resource["referenceRange"] = [{"low": {"value": 1, "unit": unit}}]
        entries.append({"resource": resource})
    return {"resourceType": "Bundle", "type": "searchset", "entry": entries}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--n", type=int, default=5000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    settings = IngestSettings()

    def once(bundle: dict[str, Any]) -> float:
        start = time.perf_counter()
        build_context([bundle], now=NOW, settings=settings, patient_id="lvh-bench")
        return time.perf_counter() - start

    figures: dict[str, Any] = {"benchmark": "ingest", "observations": args.n}
    for name, distinct in (("typical", False), ("all_distinct", True)):
        bundle = make_bundle(args.n, distinct=distinct)
        if name == "typical":
            figures["cold_seconds"] = round(once(bundle), 4)
        warm = [once(bundle) for _ in range(args.repeat)]
        out = build_context([bundle], now=NOW, settings=settings, patient_id="lvh-bench")
        figures[name] = {
            "used": len(out.report.used()),
            "ignored": len(out.report.ignored()),
            "warm_median_seconds": round(statistics.median(warm), 4),
            "warm_max_seconds": round(max(warm), 4),
            "warm_per_observation_us": round(statistics.median(warm) / args.n * 1e6, 1),
        }
    print(json.dumps(figures))


if __name__ == "__main__":
    main()
