"""HTML rendering for the web pages: Jinja2 templates with autoescaping on."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path
from typing import Any

from jinja2 import Environment, FileSystemLoader, select_autoescape

from cds_service.web import trend

TEMPLATES = Path(__file__).parent / "templates"
STATIC_BASE = "/static"

#: The caution every page carries (decision support, not an order).
CAUTION = (
    "Decision support for licensed clinicians: check against the patient and local protocols; "
    "it does not replace clinical judgement."
)

#: Indicator words shown beside colour, so the colour is never the only signal.
URGENCY_TEXT = {"critical": "Critical", "warning": "Warning", "info": "Info"}


@lru_cache(maxsize=1)
def _env() -> Environment:
    env = Environment(
        loader=FileSystemLoader(TEMPLATES),
        autoescape=select_autoescape(["html"]),
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.globals.update(
        caution=CAUTION,
        static_base=STATIC_BASE,
        urgency_text=URGENCY_TEXT,
        when=trend.when,
        number=trend.number,
        unit_text=trend.unit_text,
        value_label=trend.value_label,
    )
    return env


def render(template: str, **context: Any) -> str:
    return _env().get_template(template).render(**context)
