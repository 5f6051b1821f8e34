"""The one jinja2 environment every emitter, and the report, renders through.

Templates live in the top-level ``codegen_templates/`` folder, packaged as
``affix.codegen_templates`` (see pyproject.toml), and are found through
importlib.resources so an installed wheel works like a checkout.
StrictUndefined turns a misspelt context key into an error instead of empty
text in the generated file.
"""
from __future__ import annotations

from functools import lru_cache
from importlib.resources import files

import jinja2
import numpy as np


def float32_digits(value) -> str:
    """Shortest decimal digits that read back as exactly this float32.

    A number, not target syntax: the same digits parse identically in C and
    Python, and templates add any suffix.  Always carries '.' and an exponent
    so a suffix such as C's 'f' stays valid.
    """
    return np.format_float_scientific(np.float32(value), unique=True, trim="0", exp_digits=2)


@lru_cache(maxsize=1)
def environment() -> jinja2.Environment:
    root = files("affix.codegen_templates")
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(root)),
        undefined=jinja2.StrictUndefined,
        # HTML pages escape every value; C and Python sources never.
        autoescape=jinja2.select_autoescape(enabled_extensions=("html.jinja",), default=False),
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    env.filters["float32_digits"] = float32_digits
    return env


def render(template_name: str, **context) -> str:
    """Render ``codegen_templates/<template_name>`` with ``context``."""
    return environment().get_template(template_name).render(**context)
