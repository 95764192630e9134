"""`recoilsim new NAME`: a commented template scenario with every key explained.

The template is generated from :data:`sim.config.schema.SCHEMA` (allowed range, default, physical
dimension) and the one-line meanings below, so it lists every key the loader knows.  Required
keys are set to an invented example; optional keys are commented out at their default (or at
an example value when their default is an automatic choice).  The file loads as written.
"""

from __future__ import annotations

import json
import textwrap

from .registry import METHOD_ENTRIES, MODEL_ENTRIES, described
from .schema import SCHEMA
from .units import ALLOWED_UNITS

#: meaning of every scenario key, with its unit in natural units (hbar = c = 1)
MEANINGS: dict[str, str] = {
    "detector.model": "centre-of-mass model: " + described(MODEL_ENTRIES),
    "detector.ground_mass": "ground-state rest mass M_g (energy)",
    "detector.gap": "rest-frame gap Omega = M_e - M_g (energy)",
    "field.dimensions": "spatial dimensions of the scalar field",
    "field.mass": "field mass m, w_k = sqrt(k^2 + m^2) (energy); a small mass tames the 1D "
                  "infrared",
    "field.smearing": "Gaussian smearing length s of the detector, F(k) = exp(-k^2 s^2/2) "
                      "(length); 0: point-like",
    "field.cutoff": "hard UV cutoff K on |k| (momentum); omitted: none for the golden rule, "
                    "automatic for truncated baths",
    "field.temperature": "field temperature k_B T (energy); 0: vacuum",
    "coupling.strength": "monopole coupling lambda (natural units); give this or lifetime",
    "coupling.lifetime": "sets lambda so that the rest-frame golden-rule lifetime 1/Gamma(0) is "
                         "this (time); replaces strength",
    "coupling.matching": "one-particle model only: lambda_2^2 = 4 M_g M_e lambda^2 "
                         "(nonrelativistic) or = 4 M_e E_g* lambda^2 (rest-frame)",
    "coupling.rotating_wave": "rotating-wave approximation: keep sigma+ a_k and sigma- a_k^dagger "
                              "only",
    "packet.width": "position standard deviation of the Gaussian COM packet, per axis (length); "
                    "momentum spread 1/(2 width)",
    "packet.momentum": "mean COM momentum (momentum): a number (along z in 3D) or [px, py, pz]",
    "packet.internal": "initial internal state: excited (decay) or ground (thermal excitation)",
    "packet.shape": "momentum-space shape of the COM packet: gaussian (one Gaussian of width), "
                    "two-lobe (two equal Gaussian lobes of width, separation apart along the "
                    "packet axis, the direction of momentum) or file (the axial amplitude read "
                    "from amplitude_file)",
    "packet.separation": "two-lobe only: distance between the centres of the two lobes along "
                         "the packet axis (length); the spatial coherence is reported at it",
    "packet.phase": "two-lobe only: relative phase of the second lobe (radians)",
    "packet.amplitude_file": "file only: a CSV file with the header p,re,im and one row per "
                             "axial momentum p (natural units, increasing) with the real and "
                             "imaginary part of the amplitude; interpolated linearly, zero "
                             "outside the rows and normalized; in 3D times a Gaussian "
                             "transverse profile of width, and momentum gives only the axis "
                             "direction; a relative path is read from the current folder, not "
                             "the scenario's",
    "run.method": "solver: " + described(METHOD_ENTRIES),
    "run.t_max": "last sample time (time); omitted: five golden-rule lifetimes",
    "run.samples": "number of sample times from 0 to t_max",
    "run.trajectories": "markov only: number of quantum trajectories (0: the master equation)",
    "run.seed": "random seed of the quantum trajectories",
    "run.coherence_at": "distance d along the packet axis at which the spatial coherence "
                        "|Tr(rho_COM(t) exp(i P d))| / |Tr(rho_COM(0) exp(i P d))| is reported "
                        "(length); omitted: packet.separation of a two-lobe packet, else none",
    "bath.box_length": "1D truncated bath: length L_box of the periodic box (length); a box fakes "
                       "the continuum only for t < L_box",
    "bath.modes": "number of field modes of the truncated bath",
    "bath.window": "half-width of the resonance window of bath modes kept, |eps - E_e| <= window "
                   "(energy; given in momentum units in a lab scenario, c = 1)",
    "bath.radial_nodes": "3D truncated bath: quadrature nodes in |k|",
    "bath.angular_nodes": "3D truncated bath: quadrature nodes in cos(theta) about the packet "
                          "axis (one collective mode per node)",
    "bath.sectors": "number of packet momentum sectors P solved (quadrature over the packet)",
    "bath.fock_modes": "fock method: number of field modes in the Fock space",
    "bath.directions": "fock method, 3D: order n of the emission-direction rule (n nodes in "
                       "cos(theta) x 2n azimuths); omitted: the six octahedral directions",
    "bath.max_occupation": "fock method: largest occupation of one mode",
    "bath.max_quanta": "fock method: largest total number of quanta",
    "grid.points": "markov method: points of the COM momentum lattice",
    "grid.span": "markov method: packet momentum widths covered each side of the mean",
    "grid.directions": "markov method: emission-direction nodes in cos(theta) (3D; 2 in 1D)",
}

#: invented values for the required keys and for optional keys chosen automatically
EXAMPLES: dict[str, object] = {
    "detector.model": "newton-wigner",
    "detector.ground_mass": 1.0,
    "detector.gap": 0.5,
    "field.dimensions": 1,
    "field.cutoff": 4.0,
    "coupling.strength": 0.05,
    "coupling.lifetime": 400.0,
    "coupling.matching": "nonrelativistic",
    "packet.width": 20.0,
    "packet.separation": 60.0,
    "packet.amplitude_file": "amplitude.csv",
    "run.t_max": 150.0,
    "run.seed": 1,
    "run.coherence_at": 10.0,
    "bath.box_length": 2000.0,
    "bath.modes": 2048,
    "bath.window": 2.0,
    "bath.radial_nodes": 64,
    "bath.angular_nodes": 16,
    "bath.sectors": 32,
    "bath.fock_modes": 6,
    "bath.directions": 3,
    "bath.max_occupation": 2,
    "bath.max_quanta": 2,
    "grid.points": 201,
    "grid.span": 6.0,
    "grid.directions": 16,
}

#: keys written uncommented although the schema does not require them (one of strength or
#: lifetime is needed; strength is the natural-units choice)
SET_IN_TEMPLATE = ("coupling.strength", "field.mass", "run.method", "run.t_max")
#: uncommented values differing from the schema default, for a quick first run
TEMPLATE_VALUES = {"field.mass": 0.02, "run.method": "perturbative"}

#: comment lines are wrapped at this width
COMMENT_WIDTH = 99

HEADER = """\
# recoilsim scenario {title!r} (template written by `recoilsim new`; the values are invented).
#
# Every key is listed with its meaning, allowed values and default.  Required keys are set;
# optional keys are commented out ("# key = ...") at their default or an example: remove the
# "# " to set one.  Tables [bath] and [grid] only override automatic solver choices.
#
# Units: bare numbers are natural units (hbar = c = 1): energies, masses and momenta share one
# unit, times and lengths are its inverse.  Any key marked "unit string" may instead be written
# with a unit, e.g.  gap = "650 nm",  ground_mass = "40 u",  width = "50 nm",  t_max = "200 ns",
# temperature = "300 K",  lifetime = "30 ns".  A scenario that writes units must give the gap
# with a unit: it becomes the energy unit of any bare number, and the outputs are then in
# physical units (listed under "units" in summary.json).
title = {title_toml}
"""


def toml_value(value) -> str:
    """A TOML literal for a str, bool, int, float or list of them.

    Parameters
    ----------
    value : str, bool, int, float, list or tuple
        The value to write (lists and tuples become TOML arrays).

    Returns
    -------
    str
        The literal: true/false, a double-quoted string, repr() of a number, or "[a, b, ...]".

    References
    ----------
    TOML v1.0.0 specification (basic strings, booleans, integers, floats, arrays).
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return repr(value)


def key_lines(table: str, key: str) -> list[str]:
    """The comment and the (possibly commented) assignment of one key.

    Parameters
    ----------
    table : str
        Table name in :data:`sim.config.schema.SCHEMA`, e.g. "packet".
    key : str
        Key name in that table, e.g. "width".

    Returns
    -------
    list of str
        Comment lines (meaning, allowed range and default, and the unit strings allowed for a
        dimensional key), wrapped at COMMENT_WIDTH, then "key = value": uncommented for a
        required key or one of SET_IN_TEMPLATE, else prefixed with "# ".
    """
    dotted = f"{table}.{key}"
    spec = SCHEMA[table][key]
    default = "required" if spec.required else (
        f"default {toml_value(spec.default)}" if spec.default is not None else "optional")
    notes = [f"{key}: {MEANINGS[dotted]}.", f"allowed: {spec.allowed}; {default}."]
    if spec.dimension:
        notes.append(f"unit string: {ALLOWED_UNITS[spec.dimension]}.")
    lines = [line for note in notes for line in textwrap.wrap(
        note, COMMENT_WIDTH, initial_indent="# ", subsequent_indent="#     ",
        break_on_hyphens=False)]
    value = TEMPLATE_VALUES.get(dotted, EXAMPLES.get(dotted, spec.default))
    active = spec.required or dotted in SET_IN_TEMPLATE
    lines.append(("" if active else "# ") + f"{key} = {toml_value(value)}")
    return lines


def template_text(title: str) -> str:
    """The whole template scenario.

    Parameters
    ----------
    title : str
        The scenario's title, written in the header comment and as the ``title`` key.

    Returns
    -------
    str
        TOML text: the header, then every table of the schema with every key explained; it
        loads as written.
    """
    parts = [HEADER.format(title=title, title_toml=toml_value(title))]
    for table, keys in SCHEMA.items():
        body = [line for key in keys for line in key_lines(table, key)]
        parts.append(f"\n[{table}]\n" + "\n".join(body) + "\n")
    return "".join(parts)
