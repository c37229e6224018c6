"""Rehearsal before go-live: replay a FHIR Bulk Data export through the live service's code
and report the alert burden and the correction-limit breaches it would have found.

``tonicity rehearse EXPORT_DIR --from DATE --to DATE`` is the command; :func:`rehearse` runs
it from Python. See ``runner`` (stages, pool or Dask, manifest), ``export`` (streamed NDJSON,
DuckDB grouping), ``timeslice`` (the record at a moment), ``patient`` (one patient's replay),
``tally`` and ``report``; ``synthetic`` writes an invented export.
"""

from cds_service.rehearsal.runner import Options, Stopped, rehearse

__all__ = ["Options", "Stopped", "rehearse"]
