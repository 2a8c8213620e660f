"""Plan files: one TOML file that names the inputs, endmembers, options and outputs of a whole run.

:func:`read_plan` checks a plan (unknown keys, types, ranges, required keys, paths, choices that
exclude each other) and normalises it; :func:`template_text` is the commented template;
:func:`stored_plan` reads the plan a product was made with back from the product.
"""

from .read import Plan, parse_plan, read_plan
from .schema import ENDMEMBER_SOURCES, Key, Section, schema
from .stored import make_output_folder, stored_plan, write_plan
from .toml import dumps, format_value, template_text

__all__ = ["Plan", "read_plan", "parse_plan", "stored_plan", "write_plan", "make_output_folder", "template_text", "dumps", "format_value", "schema",
           "Key", "Section", "ENDMEMBER_SOURCES"]
