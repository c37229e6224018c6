"""Read a FHIR Bulk Data export folder, streamed, and group its lines by patient with DuckDB.

Stage 1 (:func:`spool_file`, one task per file, run in parallel): each ``*.ndjson`` or
``*.ndjson.gz`` file is read line by line (never whole), each line parsed once to find its
resource type and patient, and written with its file and line number to a Parquet spool file
in batches. A line that is not a JSON object with a ``resourceType``, or names no patient, is
counted and listed with its file and line number; nothing is dropped silently.

Stage 2 (:func:`partition`): DuckDB rewrites the spool as Parquet partitioned by a hash of the
patient id, so that each partition holds whole patients; :func:`patients_of` then streams one
partition's patients, each with its lines in file order, grouped by DuckDB.
"""

from __future__ import annotations

import gzip
import zlib
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import orjson

from cds_service.errors import UserError

#: Resource types the rehearsal reads; lines of other types are counted as not used.
READ_TYPES = frozenset(
    {
        "Patient",
        "Observation",
        "MedicationRequest",
        "MedicationAdministration",
        "MedicationStatement",
        "Condition",
        "Encounter",
    }
)
SUFFIXES = (".ndjson", ".ndjson.gz")
BUCKETS = 4096  # fine hash buckets; partitions are buckets modulo the partition count
_BATCH = 20_000


def export_files(folder: Path) -> list[Path]:
    """The export's NDJSON files in name order; UserError when there are none."""
    if not folder.is_dir():
        raise UserError(f"export folder {folder} does not exist or is not a folder")
    files = sorted(p for p in folder.iterdir() if p.is_file() and p.name.endswith(SUFFIXES))
    if not files:
        raise UserError(f"export folder {folder} holds no .ndjson or .ndjson.gz file")
    return files


def bucket(patient_id: str) -> int:
    return zlib.crc32(patient_id.encode()) % BUCKETS


def _patient_of(res: dict[str, Any]) -> str | None:
    if res.get("resourceType") == "Patient":
        rid = res.get("id")
        return rid if isinstance(rid, str) and rid else None
    for name in ("subject", "patient"):
        ref = res.get(name)
        if isinstance(ref, dict) and isinstance(ref.get("reference"), str):
            text = ref["reference"]
            if "Patient/" in text:
                pid = text.rsplit("Patient/", 1)[1].split("/")[0]
                return pid or None
    return None


def _classify(line: bytes) -> tuple[str, str | None, str | None]:
    """(resource type, patient id, problem) of one line."""
    if not line.strip():
        return "", None, "empty line"
    try:
        res = orjson.loads(line)
    except orjson.JSONDecodeError as exc:
        return "", None, f"not valid JSON ({str(exc).splitlines()[0][:80]})"
    if not isinstance(res, dict):
        return "", None, "not a JSON object"
    kind = res.get("resourceType")
    if not isinstance(kind, str) or not kind:
        return "", None, "JSON object without resourceType"
    if kind not in READ_TYPES:
        return kind, None, None
    pid = _patient_of(res)
    if pid is None:
        return kind, None, f"{kind} names no patient (no Patient/ reference or id)"
    return kind, pid, None


@dataclass(frozen=True, slots=True)
class SpoolTask:
    index: int
    source: str  # path of the NDJSON file
    target: str  # path of the Parquet spool file to write


def _lines(path: Path) -> Iterator[bytes]:
    if path.name.endswith(".gz"):
        with gzip.open(path, "rb") as fh:
            yield from fh
    else:
        with path.open("rb") as fh:
            yield from fh


def spool_file(task: SpoolTask) -> dict[str, Any]:
    """Stage 1 for one file: spool its usable lines; count and list the others."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = pa.schema(
        [
            ("bucket", pa.int32()),
            ("pid", pa.string()),
            ("src", pa.int32()),
            ("line_no", pa.int64()),
            ("line", pa.binary()),
        ]
    )
    path = Path(task.source)
    kinds: Counter[str] = Counter()
    unused: Counter[str] = Counter()
    problems: list[tuple[int, str]] = []
    cols: dict[str, list[Any]] = {name: [] for name in schema.names}
    n = 0
    writer = pq.ParquetWriter(task.target, schema, compression="zstd")

    def flush() -> None:
        if cols["pid"]:
            writer.write_table(pa.table(cols, schema=schema))
            for v in cols.values():
                v.clear()

    try:
        try:
            for n, raw in enumerate(_lines(path), start=1):
                line = raw.rstrip(b"\r\n")
                kind, pid, problem = _classify(line)
                if problem is not None:
                    problems.append((n, problem))
                elif pid is None:
                    unused[kind] += 1
                else:
                    kinds[kind] += 1
                    cols["bucket"].append(bucket(pid))
                    cols["pid"].append(pid)
                    cols["src"].append(task.index)
                    cols["line_no"].append(n)
                    cols["line"].append(line)
                    if len(cols["pid"]) >= _BATCH:
                        flush()
        except (OSError, EOFError, zlib.error) as exc:  # a truncated or corrupt gzip file
            problems.append((n + 1, f"file cannot be read past this line ({exc})"))
        flush()
    finally:
        writer.close()
    return {
        "file": path.name,
        "lines": n,
        "resources": dict(kinds),
        "not_used": dict(unused),
        "problems": problems,
    }


def partition(spool_dir: Path, parts_dir: Path, partitions: int, threads: int) -> dict[int, int]:
    """Stage 2: the spool rewritten as Parquet partitioned by patient; patients per partition."""
    import duckdb

    n = int(partitions)
    glob = str(spool_dir / "*.parquet")
    # a fixed memory limit (DuckDB spills to the temporary folder beyond it): the peak does
    # not grow with the export
    con = duckdb.connect(config={"threads": max(1, int(threads)), "memory_limit": "256MB"})
    try:
        con.execute("SET preserve_insertion_order = false")
        # COPY's target and SET's value cannot be parameters: our own paths, quotes doubled
        con.execute(f"SET temp_directory = '{_sql_path(spool_dir / 'duckdb-tmp')}'")
        con.execute(
            f"COPY (SELECT bucket % {n} AS part, pid, src, line_no, line "  # noqa: S608
            f"FROM read_parquet('{_sql_path(spool_dir)}/*.parquet')) TO '{_sql_path(parts_dir)}' "
            "(FORMAT parquet, PARTITION_BY (part), OVERWRITE_OR_IGNORE true)"
        )
        rows = con.execute(
            "SELECT bucket % ? AS part, count(DISTINCT pid) FROM read_parquet(?) GROUP BY 1",
            [n, glob],
        ).fetchall()
    finally:
        con.close()
    return {int(p): int(c) for p, c in rows}


def count_patients(spool_dir: Path) -> int:
    """Distinct patient ids in the spool."""
    import duckdb

    con = duckdb.connect(config={"memory_limit": "128MB"})
    try:
        row = con.execute(
            "SELECT count(DISTINCT pid) FROM read_parquet(?)", [str(spool_dir / "*.parquet")]
        ).fetchone()
    finally:
        con.close()
    return int(row[0]) if row else 0


def patients_of(parts_dir: Path, part: int) -> Iterator[tuple[str, list[bytes]]]:
    """One partition's patients in id order, each with its lines in file and line order."""
    import duckdb

    folder = parts_dir / f"part={part}"
    if not folder.is_dir():
        return
    con = duckdb.connect(config={"threads": 1, "memory_limit": "128MB"})
    try:
        cur = con.execute(
            "SELECT pid, list(line ORDER BY src, line_no) FROM read_parquet(?) "
            "GROUP BY pid ORDER BY pid",
            [str(folder / "*.parquet")],
        )
        while rows := cur.fetchmany(200):
            yield from rows
    finally:
        con.close()


def _sql_path(path: Path) -> str:
    return str(path).replace("'", "''")
