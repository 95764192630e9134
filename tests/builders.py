"""The one scenario builder of the test suite, and its TOML writer.

Tests reach it through the `make_scenario` and `write_scenario` fixtures of tests/conftest.py;
module-level constants and hypothesis strategies, which run where no fixture is available, call
`build_scenario` directly.  Every number here is invented for the tests.
"""

from __future__ import annotations

import json
from pathlib import Path

#: Named arguments of `build_scenario` and their defaults: a small, fast, perturbative 1D run of a
#: heavy Galilean detector.  None leaves the key out of the scenario (the loader's default applies).
DEFAULTS = {
    "title": "test",            # title
    "model": "galilean",        # detector.model
    "ground_mass": 10.0,        # detector.ground_mass
    "gap": 0.5,                 # detector.gap
    "dims": 1,                  # field.dimensions
    "strength": 0.1,            # coupling.strength
    "width": 20.0,              # packet.width
    "momentum": 0.1,            # packet.momentum
    "internal": None,           # packet.internal
    "method": "perturbative",   # run.method
    "t_max": 300.0,             # run.t_max
    "samples": 51,              # run.samples
    "lifetimes": None,          # run.t_max = lifetimes / (packet-averaged golden-rule rate)
}

_PLACES = {"model": ("detector", "model"), "ground_mass": ("detector", "ground_mass"),
           "gap": ("detector", "gap"), "dims": ("field", "dimensions"),
           "strength": ("coupling", "strength"), "width": ("packet", "width"),
           "momentum": ("packet", "momentum"), "internal": ("packet", "internal"),
           "method": ("run", "method"), "t_max": ("run", "t_max"), "samples": ("run", "samples")}


def build_scenario(preset: dict | None = None, /, **options) -> dict:
    """A raw scenario dict (what a scenario file holds), built from a few keyword arguments.

    Parameters
    ----------
    preset : dict, optional
        Keyword arguments to start from (a test module's own defaults); `options` win over it.
    **options
        The named arguments of `DEFAULTS`, and any other key as ``table__key=value`` (e.g.
        ``field__mass=0.02``, ``bath__box_length=60.0``), applied after the named ones.  A value
        None leaves the key out (or removes it).  ``lifetimes=n`` sets run.t_max to n golden-rule
        lifetimes (1 / sim.physics.golden_rule.packet_rate) of the scenario as built otherwise.

    Returns
    -------
    dict
        Tables detector, field, coupling and packet always; run only when one of its keys is set;
        title unless it is None.
    """
    options = {**(preset or {}), **options}
    named = {name: options.pop(name, default) for name, default in DEFAULTS.items()}
    raw: dict = {} if named["title"] is None else {"title": named["title"]}
    for table in ("detector", "field", "coupling", "packet"):
        raw[table] = {}
    for name, (table, key) in _PLACES.items():
        if named[name] is not None:
            raw.setdefault(table, {})[key] = named[name]
    for dotted, value in options.items():
        table, sep, key = dotted.partition("__")
        if not sep or not table or not key:
            raise TypeError(f"build_scenario: {dotted!r} is neither a named argument "
                            f"({', '.join(DEFAULTS)}) nor table__key")
        if value is None:
            raw.get(table, {}).pop(key, None)
        else:
            raw.setdefault(table, {})[key] = value
    if named["lifetimes"] is not None:
        if "t_max" in raw.get("run", {}):
            raise TypeError("build_scenario: give t_max or lifetimes, not both")
        from sim.physics.checks import load_scenario
        from sim.physics.golden_rule import packet_rate

        raw.setdefault("run", {})["t_max"] = named["lifetimes"] / packet_rate(load_scenario(raw))
    return raw


def toml_text(raw: dict) -> str:
    """The scenario dict as TOML (flat tables of numbers, strings, booleans and lists of them)."""
    lines = [f"title = {json.dumps(raw['title'])}"] if "title" in raw else []
    for table, keys in raw.items():
        if table == "title":
            continue
        lines.append(f"[{table}]")
        for key, value in keys.items():
            text = json.dumps(value) if not isinstance(value, bool) else str(value).lower()
            lines.append(f"{key} = {text}")
    return "\n".join(lines) + "\n"


def write_toml(folder: Path, raw: dict, name: str = "s.toml") -> Path:
    """Write `raw` as TOML to folder/name; returns the path."""
    path = Path(folder) / name
    path.write_text(toml_text(raw))
    return path
