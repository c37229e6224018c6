"""Tonicity's clinical core: pure computation, no FHIR, no HTTP, no I/O.

Public entry points (see the modules for details):

- ``thresholds.load_thresholds(overrides)`` -> ``Thresholds`` (data/thresholds.toml)
- ``engine.evaluate_workup(ctx, th)`` and ``engine.evaluate_orders(ctx, th)`` -> ``list[Finding]``
- ``correction.applicable_limits(ctx, th)`` and ``correction.episode_start(ctx, th)``
- ``formulas``: the published formulas as plain functions
- ``infusates.resolve(draft, th)`` and ``drugs.classify(names, rxnorm, display)``

Shared models live in ``context`` (the input) and ``findings`` (the output).
"""
