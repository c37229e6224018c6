"""The CDS Hooks 2.0 protocol layer.

- :mod:`~cds_service.hooks.models`: request/response bodies and the spec's JSON rules;
- :mod:`~cds_service.hooks.registry`: the services and their prefetch templates;
- :mod:`~cds_service.hooks.prefetch` and :mod:`~cds_service.hooks.fetch`: data gathering;
- :mod:`~cds_service.hooks.cards`: Finding -> Card;
- :mod:`~cds_service.hooks.service`: ``evaluate_request`` / ``HookError``, one hook call;
- :mod:`~cds_service.hooks.client`: a CDS client's view of a patient Bundle (``evaluate``);
- :mod:`~cds_service.hooks.auth`: client authentication (JWT) and the FHIR-server allowlist.

Submodules are imported where used, so that importing one does not pull in the others.
"""
