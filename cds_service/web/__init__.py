"""Web pages of Tonicity: the integrator's workbench at ``/`` and the clinician's sodium trend
pages at ``/trend/{token}`` (snapshots are stored by ``hooks.snapshots``). matplotlib loads only
when a chart is drawn.
"""

from cds_service.web.routes import create_router

__all__ = ["create_router"]
