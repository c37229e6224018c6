"""The sample files the workbench offers: listed from ``sample_bundles/manifest.json``.

Only files the folder actually holds and the listing names can be served: a request for any
other name (``../``, absolute paths, a file added outside the listing) is refused, so the
sample routes cannot read anything else on the machine.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

#: Default sample folder: ``sample_bundles/`` at the repository root (beside the package).
DEFAULT_SAMPLE_DIR = Path(__file__).resolve().parents[2] / "sample_bundles"
MAX_SAMPLE_BYTES = 5_000_000


@dataclass(frozen=True, slots=True)
class Sample:
    name: str  # path relative to the sample folder, "/" separated
    kind: str  # "request" (has "hook") | "bundle" (a FHIR Bundle or resource)
    hook: str | None
    story: str
    now: str | None = None  # the evaluation time the sample was written for (ISO 8601)

    def as_json(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "kind": self.kind,
            "hook": self.hook,
            "story": self.story,
            "now": self.now,
        }


class SampleNotFound(LookupError):
    pass


def _read_json(path: Path) -> Any:
    try:
        if path.stat().st_size > MAX_SAMPLE_BYTES:
            return None
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _inside(folder: Path, name: str) -> Path | None:
    """``folder / name`` if that is a regular file inside ``folder``, else None."""
    if not name or "\\" in name or name.startswith("/") or "\x00" in name:
        return None
    try:
        path = (folder / name).resolve()
    except (OSError, ValueError):
        return None
    if not path.is_relative_to(folder.resolve()) or not path.is_file():
        return None
    return path


def _manifest_entries(folder: Path) -> list[dict[str, Any]] | None:
    """Manifest entries (each with ``file``), the manifest-wide ``now`` filled in."""
    data = _read_json(folder / "manifest.json")
    default_now = None
    if isinstance(data, dict):
        default_now = data.get("now")
        data = data.get("samples")
    if not isinstance(data, list):
        return None
    return [
        {"now": default_now, **e}
        for e in data
        if isinstance(e, dict) and isinstance(e.get("file"), str)
    ]


def list_samples(folder: Path) -> list[Sample]:
    """Samples in manifest order; every JSON file of the folder when there is no manifest."""
    if not folder.is_dir():
        return []
    entries = _manifest_entries(folder)
    if entries is None:
        entries = [
            {"file": p.relative_to(folder).as_posix()}
            for p in sorted(folder.rglob("*.json"))
            if p.name != "manifest.json"
        ]
    out: list[Sample] = []
    for e in entries:
        path = _inside(folder, e["file"])
        if path is None:
            continue
        kind, hook = e.get("kind"), e.get("hook")
        if kind not in ("request", "bundle"):  # not in the manifest: look inside
            body = _read_json(path)
            if not isinstance(body, dict):
                continue
            kind = "request" if isinstance(body.get("hook"), str) else "bundle"
            hook = body.get("hook", hook)
        out.append(
            Sample(
                name=e["file"],
                kind=kind,
                hook=hook if isinstance(hook, str) else None,
                story=str(e.get("story") or ""),
                now=e["now"] if isinstance(e.get("now"), str) else None,
            )
        )
    return out


def find_sample(folder: Path, name: str) -> tuple[Sample, Path]:
    """A listed sample and its file; raises :class:`SampleNotFound` for anything else."""
    listed = {s.name: s for s in list_samples(folder)}
    path = _inside(folder, name) if name in listed else None
    if path is None:
        raise SampleNotFound(name)
    return listed[name], path
