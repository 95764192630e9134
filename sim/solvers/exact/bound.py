"""Bound states of the exact solver's sectors: dressed states outside the continuum band.

A sector's star Hamiltonian (`star`) has one eigenvalue below its lowest bright mode e_0 and one
above its highest e_{M-1}.  In the continuum limit (mode spacing -> 0) such an outer eigenvalue
either merges into the band edge (no bound state) or stays a finite distance away: a bound
state E_b solving E_b - E_e(P) - Sigma_P(E_b) = 0 outside the band, with the level weight
w_b = |<e|b>|^2 = 1 / (1 - Sigma_P'(E_b)) (the residue of the resolvent).  A bound state keeps
w_b^2 of P_e(t) for ever (population trapping).

Criterion used here: an outer eigenvalue counts as a bound state when it lies beyond the band
edge by more than the local mode spacing there, e_0 - z > e_1 - e_0 below (z - e_{M-1} >
e_{M-1} - e_{M-2} above).  An eigenvalue closer to the edge than one spacing cannot be told
from the discrete bath's own lowest (highest) state, so it is not reported: a very weakly
bound state needs a finer bath (larger bath.box_length, more bath.radial_nodes).

Units: hbar = 1; energies in the energy unit (measured from M_g, as in `baths`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: sides of the band a bound state can lie on
BELOW, ABOVE = "below", "above"


@dataclass(frozen=True)
class BoundState:
    """A dressed state of one sector outside the continuum band.

    Parameters
    ----------
    energy : float
        Eigenvalue E_b (energy units, from M_g).
    weight : float
        w_b = |<e|b>|^2, the residue of the eigenvalue (dimensionless); it keeps w_b^2 of P_e.
    side : str
        "below" the band's lowest mode or "above" its highest.
    """

    energy: float
    weight: float
    side: str


def bound_states(sector, spectrum) -> list[BoundState]:
    """The eigenvalues of a sector's star spectrum outside the band, with their level weights.

    z_0 is bound below when e_0 - z_0 > e_1 - e_0, z_M bound above when
    z_M - e_{M-1} > e_{M-1} - e_{M-2} (e_i the bright-mode energies, increasing; the local
    spacing is 0 with a single bright mode); its weight is the residue w_j = 1 / f'(z_j) of the
    secular function f(z) = z - E_e - sum_i b_i / (z - e_i).

    Parameters
    ----------
    sector : Sector
        The sector (`sim.solvers.exact.baths.Sector`); only its mode energies are read, to
        check that the spectrum belongs to a bath with modes.
    spectrum : StarSpectrum
        Its star spectrum (`sim.solvers.exact.star.star_spectrum`).

    Returns
    -------
    list of BoundState
        Below the band first; empty when the sector has no coupled modes.
    """
    edges = spectrum.modes.energies
    if sector.mode_energies.size == 0 or edges.size == 0:
        return []
    z, w = spectrum.eigenvalues, spectrum.residues
    below = edges[1] - edges[0] if edges.size > 1 else 0.0
    above = edges[-1] - edges[-2] if edges.size > 1 else 0.0
    out = []
    if edges[0] - z[0] > below:
        out.append(BoundState(float(z[0]), float(w[0]), BELOW))
    if z[-1] - edges[-1] > above:
        out.append(BoundState(float(z[-1]), float(w[-1]), ABOVE))
    return out


def packet_bound_states(sectors, states) -> dict:
    """Packet-level summary of the sectors' bound states, for summary.json.

    With w_P the sector weights (sum 1) and, on each side of the band, w_b(P) and E_b(P) the
    bound state of sector P (`bound_states`; w_b = 0 where there is none):

        fraction  = sum_P w_P [P has one],
        binding   = sum_P w_P [E_b(P) - E_e(P)] / fraction   (sectors that have one),
        weight    = sum_P w_P w_b(P),
        trapped   = sum_P w_P w_b(P)^2   (its share of the long-time P_e).

    Parameters
    ----------
    sectors : sequence of Sector
    states : sequence of list of BoundState
        `bound_states` of each sector, in the same order.

    Returns
    -------
    dict
        "below" and "above": None where no sector has a bound state on that side, else
        {"energy_from_level": binding (energy units), "weight": weight, "trapped_population":
        trapped, "sector_fraction": fraction (dimensionless)}; "trapped_population": the sum of
        both sides' trapped parts (the time average of P_e once the continuum has decayed,
        dimensionless).
    """
    sums = {BELOW: np.zeros(4), ABOVE: np.zeros(4)}  # fraction, fraction x binding, weight, trapped
    for sector, found in zip(sectors, states):
        for state in found:
            sums[state.side] += sector.weight * np.array(
                [1.0, state.energy - sector.level_energy, state.weight, state.weight ** 2])
    out = {side: None if not total[0] > 0 else {
        "energy_from_level": float(total[1] / total[0]), "weight": float(total[2]),
        "trapped_population": float(total[3]), "sector_fraction": float(total[0])}
        for side, total in sums.items()}
    out["trapped_population"] = float(sums[BELOW][3] + sums[ABOVE][3])
    return out
