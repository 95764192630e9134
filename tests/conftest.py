"""Fixtures shared by the whole suite: the scenario builder and its TOML writer."""

from __future__ import annotations

from pathlib import Path

import pytest

from .builders import build_scenario, write_toml


@pytest.fixture(scope="session")
def make_scenario():
    """`build_scenario(preset=None, /, **options)` of tests/builders.py: a raw scenario dict.

    Named options (title, model, ground_mass, gap, dims, strength, width, momentum, internal,
    method, t_max, samples, lifetimes) fill their usual keys; ``table__key=value`` sets any other
    key; None leaves a key out.  Session-scoped, so module-scoped fixtures may use it too.
    """
    return build_scenario


@pytest.fixture
def write_scenario(tmp_path):
    """`write_scenario(raw, name="s.toml", folder=tmp_path) -> Path`: the dict as a TOML file."""
    def write(raw: dict, name: str = "s.toml", folder: Path | None = None) -> Path:
        return write_toml(tmp_path if folder is None else folder, raw, name)
    return write
