"""Physical units in scenario files (placeholder: natural units only).

`resolve_units(raw, schema)` returns (raw with quantities as numbers, UnitSystem or None, problems).
"""

from __future__ import annotations


def resolve_units(raw, schema):
    """Natural units only for now: the scenario is returned unchanged."""
    return raw, None, []
