"""`recoilsim new NAME`: write the commented template scenario (`sim.config.template`)."""

from __future__ import annotations

from pathlib import Path

from ..config.template import template_text
from ..errors import OutputExists
from ..io.atomic import atomic_write_text


def template_path(name: str) -> Path:
    """NAME -> ./NAME.toml, or NAME itself when it ends in .toml.

    Parameters
    ----------
    name : str
        Scenario name, or a path ending in .toml.

    Returns
    -------
    Path
        The template's path (relative paths are relative to the working directory).
    """
    return Path(name if name.endswith(".toml") else f"{name}.toml")


def write_template(name: str, force: bool = False) -> Path:
    """Write the template scenario for `name` (atomically); returns the path written.

    Parameters
    ----------
    name : str
        Scenario name, or a path ending in .toml (`template_path`); the file's stem becomes
        the template's title.
    force : bool
        Replace an existing file.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    OutputExists
        If the file exists and `force` is not given.
    """
    path = template_path(name)
    if path.exists() and not force:
        raise OutputExists(f"{str(path)!r}: exists; pass --force to replace it, or choose "
                           "another name")
    atomic_write_text(path, template_text(path.stem))
    return path
