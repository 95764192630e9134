"""Exact single-excitation dynamics of one total-momentum sector.

Under the rotating-wave approximation a sector is a *star*: one level |e> (energy E0) coupled
to N bath modes |k> (energies eps_k, couplings g_k, complex allowed),

    i dc/dt   = E0 c + sum_k g_k c_k
    i dc_k/dt = eps_k c_k + conj(g_k) c,        c(0) = 1,  c_k(0) = 0.

Its Hamiltonian is an arrowhead matrix.  Its eigenvalues z_j are the roots of the secular
equation

    f(z) = z - E0 - sum_i b_i / (z - e_i) = 0,                                         (S)

where e_i < e_{i+1} are the distinct energies of the *bright* modes and b_i > 0 their weights
(see `bright_modes`).  f rises from -inf to +inf between neighbouring poles, so there is exactly
one root below e_0, one in each gap (e_{i-1}, e_i) and one above e_{M-1}: M + 1 roots for M
bright modes.  The level's weight in eigenstate j is the residue w_j = 1 / f'(z_j), and

    c(t)   = sum_j w_j exp(-i z_j t),
    c_k(t) = conj(g_k) sum_j w_j exp(-i z_j t) / (z_j - e_{i(k)})                       (A)

with i(k) the bright mode containing mode k.  Both are exact for the truncated bath: there is
no time step.  Each root is stored as (anchor pole energy, offset) with z_j = anchor + offset,
the anchor being the nearer end of its bracket, so that the small differences z_j - e_i, which
carry the eigenvectors, are never formed by cancellation (the standard treatment of secular
equations in divide-and-conquer eigensolvers; common practice).

Cost: root finding O(M^2) per pass for small M, and for large M O(M^2 n / P) once plus O(M P)
per pass (near poles direct, far poles interpolated: `PanelledPoleSums`), with O(M) memory (the
M x M Cauchy matrix is never stored, only blocks of `_BLOCK_ELEMENTS`); O(M x len(times)) for
c(t), with only O(M sqrt(T)) exponentials on a uniform time grid; O(M^2 x len(times)) for all
c_k(t).

Units: hbar = 1; energies in the project's energy unit, times in its inverse.

References: G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318
(the secular equation of a diagonal-plus-rank-one matrix); L. N. Trefethen, Approximation
Theory and Approximation Practice (SIAM 2013), ch. 8 (Chebyshev interpolation of analytic
functions).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

MERGE_RTOL = 1e-12
"""Relative energy tolerance under which modes count as degenerate (see `bright_modes`)."""

_BLOCK_ELEMENTS = 1 << 18  # largest temporary array, in elements (2 MiB of float64; measured best)
_GRID_RTOL = 8 * np.finfo(float).eps  # times closer than this to t_0 + n dt count as a uniform grid
_PANEL_MIN_POLES = 1024  # from this many bright modes on, far poles are interpolated (measured)
_PANEL_SCALE = 2.0  # panel size / sqrt(M): balances the interpolants' set-up against near sums
_NEAR_REACH = 2.0  # poles within this many panel half-widths of a panel are summed directly
_CHEBYSHEV_NODES = 22  # far poles >= 3 half-widths from the centre: (3 + sqrt 8)^-22 ~ 1.5e-17
_STEP_RTOL = 4 * np.finfo(float).eps  # a root is converged when its last correction is this small
_MAX_STEPS = 64  # the local model converges in ~4 steps; bisection bounds the worst case
#: most Gauss-Legendre nodes per part of a step in the Duhamel recurrence
DUHAMEL_NODES = 16
#: largest phase w h / m per part of a step (the 16-point rule's error there is 6.5e-14)
DUHAMEL_PHASE = 20.0
#: largest error of the Duhamel rule on exp(i w s) over one part, relative to the part's length
DUHAMEL_TOLERANCE = 1e-13
#: amplitudes per block of the Duhamel recurrence (2 MiB of complex numbers: a block, its
#: squares and projections stay in the cache; measured 1.2-1.4x faster than 16 MiB blocks)
CHUNK_ELEMENTS = 1 << 17
#: fewest times per block: each block reads the whole (nodes x modes) kernel once, so with
#: 1e5 modes blocks of one or three times made the recurrence memory-bound (measured)
CHUNK_MIN_ROWS = 8


@dataclass(frozen=True)
class BrightModes:
    """The bath reduced to the modes that couple to the level.

    Modes of (nearly) equal energy couple only through their bright combination
    |B> = sum_{k in B} conj(g_k) |k> / sqrt(b_B), b_B = sum_{k in B} |g_k|^2; the orthogonal
    (dark) combinations decouple and stay empty.  Modes with g_k = 0 belong to no bright mode.

    Parameters
    ----------
    energies : ndarray, shape (M,)
        e_i, strictly increasing, the |g|^2-weighted mean energy of each group (energy units).
    weights : ndarray, shape (M,)
        b_i = sum of |g_k|^2 over the group, all > 0 (energy^2).
    member_of : ndarray of int, shape (N,)
        For each original mode k, the index i of its bright mode, or -1 if g_k = 0.
    """

    energies: np.ndarray
    weights: np.ndarray
    member_of: np.ndarray


@dataclass(frozen=True)
class StarSpectrum:
    """Eigen-decomposition of a star sector, from which c(t) and c_k(t) follow at any times.

    Eigenvalue j is z_j = anchor_energies[j] + offsets[j], with anchor_energies[j] the
    bright-mode energy nearest to z_j within its bracket (E0 itself if no mode couples), and
    residues[j] = w_j = |<e|j>|^2 = 1 / f'(z_j), f the secular function
    f(z) = z - E0 - sum_i b_i / (z - e_i); the residues sum to 1 up to rounding (`residue_sum`).

    Parameters
    ----------
    level_energy : float
        E0 (energy units).
    modes : BrightModes
        The bright modes e_i, b_i and each mode's membership.
    couplings : ndarray, shape (N,)
        The original couplings g_k (energy units, complex).
    anchor_energies : ndarray, shape (M + 1,)
        Anchor pole energy of each root (energy units).
    offsets : ndarray, shape (M + 1,)
        z_j - anchor (energy units).
    residues : ndarray, shape (M + 1,)
        w_j (dimensionless).

    References
    ----------
    G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318.
    """

    level_energy: float
    modes: BrightModes
    couplings: np.ndarray
    anchor_energies: np.ndarray
    offsets: np.ndarray
    residues: np.ndarray

    @property
    def eigenvalues(self) -> np.ndarray:
        """The eigenvalues z_j = anchor_j + offset_j, in increasing order.

        Returns
        -------
        ndarray, shape (M + 1,)
            z_j (energy units).
        """
        return self.anchor_energies + self.offsets

    @property
    def residue_sum(self) -> float:
        """sum_j w_j, equal to <e|e> = 1 for an exact decomposition: the norm check.

        Returns
        -------
        float
            sum_j w_j (dimensionless).
        """
        return float(np.sum(self.residues))

    def level_amplitude(self, times) -> np.ndarray:
        """c(t) = sum_j w_j exp(-i z_j t) at each time, in O(M x T).

        On a uniform grid t_n = t_0 + n dt (any linspace) the phase factorises exactly: with
        n = a B + b, exp(-i z t_n) = exp(-i z t_0) exp(-i z a B dt) exp(-i z b dt), so c on the
        grid is one complex matrix product (A x M) @ (M x B) with A B >= T and B ~ sqrt(T)
        (`_grid_level_amplitudes` with the one offset t_0).  Both factors are tables of
        `_grid_phases` (each entry a product of exponentials exact to rounding: about
        2 sqrt(A) + 2 sqrt(B) + 1 exponentials per root instead of T), with no recurrence and no
        growth of the error with n; other time sets are summed directly.

        Parameters
        ----------
        times : array_like, shape (T,)
            Times, any real values and order (time units).

        Returns
        -------
        ndarray, shape (T,)
            c(t) (complex, dimensionless).

        Raises
        ------
        ValueError
            If `times` is not one-dimensional.
        """
        times = _as_times(times)
        grid = _uniform_grid(times)
        if grid is None:
            return self._summed_level_amplitude(times)
        start, step, _ = grid
        return _grid_level_amplitudes(self.eigenvalues, self.residues, step, times.size,
                                      np.array([start]))[:, 0]

    def _summed_level_amplitude(self, times) -> np.ndarray:
        """c(t) = sum_j w_j exp(-i z_j t) summed directly at arbitrary times, in O(M x T)."""
        eigenvalues = self.eigenvalues
        amplitude = np.zeros(times.size, dtype=complex)
        for roots in _blocks(eigenvalues.size, times.size):
            amplitude += _unit_phases(np.outer(times, eigenvalues[roots])) @ self.residues[roots]
        return amplitude

    def mode_amplitudes(self, times) -> np.ndarray:
        """Mode amplitudes c_k(t) = conj(g_k) sum_j w_j exp(-i z_j t) / (z_j - e_{i(k)}).

        This is equation (A), with i(k) the bright mode of mode k; modes with g_k = 0 stay 0.
        Costs O(M^2 x T) time and O(N x T) memory for the result, temporaries bounded: pass only
        the snapshot times you need (e.g. [t_final] for the final recoil distribution).

        Parameters
        ----------
        times : array_like, shape (T,)
            Times (time units).

        Returns
        -------
        ndarray, shape (T, N)
            c_k(t) (complex, dimensionless).

        Raises
        ------
        ValueError
            If `times` is not one-dimensional.
        """
        return self.modes_from_bright(self.bright_mode_amplitudes(times))

    def modes_from_bright(self, bright) -> np.ndarray:
        """c_k = conj(g_k) a_(i(k)) of every mode from the bright amplitudes (0 where g_k = 0).

        Parameters
        ----------
        bright : ndarray, shape (T, M)
            a_i (complex, 1 / energy units).

        Returns
        -------
        ndarray, shape (T, N)
            c_k (complex, dimensionless).
        """
        members = self.modes.member_of
        amplitudes = np.zeros((bright.shape[0], members.size), dtype=complex)
        coupled = members >= 0
        amplitudes[:, coupled] = np.conj(self.couplings[coupled]) * bright[:, members[coupled]]
        return amplitudes

    def bright_mode_amplitudes(self, times) -> np.ndarray:
        """a_i(t) = sum_j w_j exp(-i z_j t) / (z_j - e_i) for every bright mode i.

        Mode k's amplitude is conj(g_k) a_{i(k)}(t); bright mode i's own amplitude is
        sqrt(b_i) a_i(t).  On a uniform grid from t = 0 the Duhamel recurrence gives them in
        O(M x T) (`mode_series`), else the Cauchy sums of equation (A) in O(M^2 x T).

        Parameters
        ----------
        times : array_like, shape (T,)
            Times (time units).

        Returns
        -------
        ndarray, shape (T, M)
            a_i(t) (complex, 1 / energy units).

        Raises
        ------
        ValueError
            If `times` is not one-dimensional.
        """
        times = _as_times(times)
        empty = np.zeros((self.couplings.size, 0))
        return self.mode_series(times, empty, np.arange(times.size))[1]

    def mode_series(self, times, values, rows, spreading=None):
        """Mode sums of |c_k(t)|^2 at every time, and the bright amplitudes at some of the times.

            S(t_n) = sum_k |c_k(t_n)|^2 v_k = sum_i |a_i(t_n)|^2 F_i,
            F_i = sum_{k in i} |g_k|^2 v_k,

        e.g. with v_k = (1, p_k, p_k^2) the ground-state probability and momentum moments.
        On a uniform grid t_n = n h from 0 the amplitudes come from the exact
        Duhamel recurrence (`_duhamel_chunks`, O(M T q m) for q m quadrature nodes per step,
        temporaries of CHUNK_ELEMENTS amplitudes), else from the Cauchy sums of
        equation (A) (`_cauchy_bright_amplitudes`, O(M^2 T)); the recurrence is used where it is
        the cheaper, i.e. q m < M.

        With `spreading` the recurrence also carries the slopes of the amplitudes with a sector
        parameter lambda (|P| in 3D), b_i = d a_i / d e_i and d_i = d a_i / d lambda at fixed e_i
        (`_duhamel_chunks`), and returns the five mode sums of the position moments: with
        A = g a, B = dA/dlambda = g (gamma a + v b + d), C = g (gamma_u a + v_u b) per mode
        (`Sector.slopes`),

            sum |A|^2, sum Re A* B, sum Im A* B, sum |B|^2, sum |C|^2.

        Parameters
        ----------
        times : array_like, shape (T,)
            Times (time units).
        values : array_like, shape (N, K)
            v_k of each original mode (any units u).
        rows : array_like of int, shape (R,)
            Indices into `times` where the amplitudes are returned.
        spreading : tuple, optional
            (slopes, below, above, delta): the modes' slope integrals, shape (N, 8)
            (`Sector.slopes`), and the spectra of the same sector at lambda -/+ delta.

        Returns
        -------
        series : ndarray, shape (T, K)
            S(t_n) (u).
        amplitudes : ndarray, shape (R, M)
            a_i(times[rows]) (complex, 1 / energy units).
        spread : ndarray, shape (T, 5), or None
            The five position sums (units of |g|^2 a^2 times the slopes'), None without
            `spreading`.

        Raises
        ------
        ValueError
            If `times` is not one-dimensional, or `spreading` is asked for off a uniform grid
            from t = 0.
        """
        times = _as_times(times)
        values = np.asarray(values, dtype=float)
        projections = self._projections(values)
        rows = np.asarray(rows, dtype=int)
        grid = _uniform_grid(times)
        rule = duhamel_rule(self.eigenvalues, grid[1]) if grid is not None else (0, 0)
        from_zero = grid is not None and grid[0] == 0.0
        if spreading is not None and not from_zero:
            raise ValueError("the amplitudes' slopes need a uniform time grid from t = 0")
        if spreading is not None or (from_zero and rule[0] * rule[1] < self.modes.energies.size):
            slope = None if spreading is None else spreading[1:]
            chunks = self._duhamel_chunks(times.size, grid[1], rule, slope)
        else:
            chunks = self._cauchy_chunks(times)
        series = np.zeros((times.size, projections.shape[1]))
        spread = None
        if spreading is not None:
            weights = np.column_stack([self._projections(np.ones((self.couplings.size, 1))),
                                       self._projections(spreading[0], weighted=False)])
            spread, coefficients = np.zeros((times.size, 5)), _spreading_coefficients(weights)
        amplitudes = np.zeros((rows.size, self.modes.energies.size), dtype=complex)
        for first, block in chunks:
            level = block if spreading is None else block[0]
            series[first:first + len(level)] = (np.abs(level) ** 2) @ projections
            if spreading is not None:
                spread[first:first + len(level)] = np.einsum(
                    "pbm,pmj->bj", _amplitude_products(block), coefficients)
            inside = (rows >= first) & (rows < first + len(level))
            amplitudes[inside] = level[rows[inside] - first]
        return series, amplitudes, spread

    def _projections(self, values, weighted: bool = True) -> np.ndarray:
        """F_i = sum_{k in i} |g_k|^2 v_k for each bright mode i, shape (M, K); without the
        |g_k|^2 when `weighted` is False (values already weighted)."""
        member = self.modes.member_of
        coupled = member >= 0
        projections = np.zeros((self.modes.energies.size, values.shape[1]))
        scale = np.abs(self.couplings[coupled]) ** 2 if weighted else np.ones(coupled.sum())
        np.add.at(projections, member[coupled], scale[:, None] * values[coupled])
        return projections

    def phase_free_level(self, step: float, count: int, offsets) -> np.ndarray:
        """c(t) exp(i E0 t) at t = n h + s_r (`_grid_level_amplitudes` of z_j - E0).

        Parameters
        ----------
        step : float
            h (time units).
        count : int
            Grid times n = 0 .. count - 1.
        offsets : ndarray, shape (R,)
            s_r (time units).

        Returns
        -------
        ndarray, shape (count, R)
            (complex, dimensionless).
        """
        return _grid_level_amplitudes(self.eigenvalues - self.level_energy, self.residues, step,
                                      count, offsets)

    def level_slope(self, below, above, delta: float, step: float, count: int, offsets, level):
        """dc / dlambda at t = n h + s_r from this sector's spectra at lambda -/+ delta.

        c = exp(-i E0 t) c~ with c~ slowly varying in lambda, so

            dc / dlambda = exp(-i E0 t) (c~(lambda + delta) - c~(lambda - delta)) / (2 delta)
                           - i t E0' c,   E0' = (E0+ - E0-) / (2 delta),

        central differences of the phase-free amplitudes only (error O(delta^2)); c itself is
        the caller's, already computed at those times.

        Parameters
        ----------
        below, above : StarSpectrum
            The sector at lambda - delta and lambda + delta.
        delta : float
            The step (units of lambda).
        step : float
            h (time units).
        count : int
            Grid times n = 0 .. count - 1.
        offsets : ndarray, shape (R,)
            s_r (time units).
        level : ndarray, shape (count, R)
            c of this sector at those times (complex, dimensionless).

        Returns
        -------
        ndarray, shape (count, R)
            dc / dlambda (complex, 1 / units of lambda).
        """
        offsets = np.asarray(offsets, dtype=float)
        t = step * np.arange(count)[:, None] + offsets[None, :]
        slow = (above.phase_free_level(step, count, offsets)
                - below.phase_free_level(step, count, offsets)) / (2 * delta)
        rate = (above.level_energy - below.level_energy) / (2 * delta)
        return _unit_phases(self.level_energy * t) * slow - 1j * t * rate * level

    def _cauchy_chunks(self, times):
        """(first row, a_i at a block of consecutive times) by the Cauchy sums, any times."""
        step = max(1, (_BLOCK_ELEMENTS << 4) // max(self.modes.energies.size, 1))
        for first in range(0, times.size, step):
            yield first, self._cauchy_bright_amplitudes(times[first:first + step])

    def _cauchy_bright_amplitudes(self, times) -> np.ndarray:
        """a_i(t) by the Cauchy sums of equation (A), in O(M^2 x T): any times."""
        poles, eigenvalues = self.modes.energies, self.eigenvalues
        bright = np.zeros((times.size, poles.size), dtype=complex)
        elements = _BLOCK_ELEMENTS << 4  # matrix products run ~8x faster on large blocks
        square_side = math.isqrt(elements)  # near-square Cauchy blocks even for few times
        for roots in _blocks(eigenvalues.size, max(times.size, square_side), elements):
            phases = np.outer(times, eigenvalues[roots])
            weighted_cos = self.residues[roots] * np.cos(phases)
            weighted_sin = self.residues[roots] * np.sin(phases)
            for cols in _blocks(poles.size, max(roots.stop - roots.start, times.size), elements):
                cauchy = _cauchy_block(self.anchor_energies[roots], self.offsets[roots], poles[cols])
                bright[:, cols] += weighted_cos @ cauchy - 1j * (weighted_sin @ cauchy)
        return bright

    def _duhamel_chunks(self, count: int, step: float, rule: tuple[int, int], slope=None):
        """(first row, a_i at consecutive grid times t_n = n h) by the exact Duhamel recurrence.

        From i da_i/dt = e_i a_i + c, a_i(0) = 0:

            a_i(t_(n+1)) = exp(-i e_i h) a_i(t_n) - i Int_0^h exp(-i e_i (h - s)) c(t_n + s) ds,

        the integral by Gauss-Legendre with q nodes on each of m equal parts of the step
        (`duhamel_rule`: quadrature error at rounding level for every
        frequency of the sector).  c at the nodes is one blocked product of exact phase factors
        (`_grid_level_amplitudes`); the recurrence runs over the steps with the one-step phase
        exp(-i e_i h) (unit modulus, so rounding errors add up linearly, not exponentially).

        With `slope` = (below, above, delta) two more series run beside a_i, with the same
        nodes: b_i = da_i / de_i = -Int_0^t (t - s) exp(-i e_i (t - s)) c(s) ds, i.e.

            b_i(t_(n+1)) = exp(-i e_i h) (b_i(t_n) - i h a_i(t_n))
                           - Int_0^h (h - s) exp(-i e_i (h - s)) c(t_n + s) ds,

        and d_i = da_i / dlambda at fixed e_i, the recurrence of a_i with c replaced by
        dc / dlambda (`level_slope`).

        Parameters
        ----------
        count : int
            Number of grid times T (>= 4).
        step : float
            h (time units).
        rule : tuple of int
            (m, q) of `duhamel_rule`.
        slope : tuple, optional
            (below, above, delta) for `level_slope`.

        Yields
        ------
        first : int
            Index of the block's first time.
        block : ndarray, shape (B, M), or (3, B, M) with `slope` (a, b, d)
            a_i(t_n) for n = first .. first + B - 1 (complex, 1 / energy units; b in
            1 / energy^2, d in 1 / (energy x units of lambda)).
        """
        offsets, weights = duhamel_quadrature(step, rule)
        poles = self.modes.energies
        kernel = (-1j * weights[:, None]) * _unit_phases(np.outer(step - offsets, poles))
        sources = [_grid_level_amplitudes(self.eigenvalues, self.residues, step, count - 1, offsets)]
        kernels = [kernel]
        if slope is not None:
            sources += [sources[0], self.level_slope(*slope, step, count - 1, offsets, sources[0])]
            kernels += [kernel * (-1j * (step - offsets))[:, None], kernel]
        rotation = _unit_phases(step * poles)
        series = len(sources)
        previous = np.zeros((series, poles.size), dtype=complex)
        size = chunk_rows(poles.size, series)
        for first in range(0, count, size):
            stop = min(first + size, count)
            block = np.zeros((series, stop - first, poles.size), dtype=complex)
            steps = np.arange(max(first, 1), stop)  # D_(n-1) lands on row n
            for which in range(series):
                block[which, steps - first] = sources[which][steps - 1] @ kernels[which]
            for row in range(stop - first):
                if first + row > 0:
                    if series > 1:  # b picks up -i h a from the step before a is advanced
                        block[1, row] += rotation * (previous[1] - 1j * step * previous[0])
                        block[2, row] += rotation * previous[2]
                    block[0, row] += rotation * previous[0]
                previous = block[:, row]
            yield first, block[0] if slope is None else block


def _amplitude_products(block) -> np.ndarray:
    """|a|^2, |b|^2, |d|^2, Re a* b, Im a* b, Re a* d, Im a* d, Re b* d of a (3, B, M) block."""
    a, b, d = block
    ab, ad, bd = np.conj(a) * b, np.conj(a) * d, np.conj(b) * d
    return np.stack([np.abs(a) ** 2, np.abs(b) ** 2, np.abs(d) ** 2, ab.real, ab.imag,
                     ad.real, ad.imag, bd.real])


def _spreading_coefficients(weights) -> np.ndarray:
    """Coefficients (8 products, M, 5 sums) of the position sums from the bright slope weights.

    weights columns: W = sum |g|^2, then the sums of |g|^2 times gamma, v, gamma^2, v^2,
    gamma v, (1-u^2) gamma_u^2, (1-u^2) v_u^2, (1-u^2) gamma_u v_u (`Sector.slopes`).  With
    A = g a, B = g (gamma a + v b + d), C = g (gamma_u a + v_u b):

        sum |A|^2     = W |a|^2
        sum Re A* B   = W_gamma |a|^2 + W_v Re a* b + W Re a* d
        sum Im A* B   = W_v Im a* b + W Im a* d
        sum |B|^2     = W_gg |a|^2 + W_vv |b|^2 + W |d|^2 + 2 W_gv Re a* b + 2 W_gamma Re a* d
                        + 2 W_v Re b* d
        sum |C|^2     = W_uu |a|^2 + W_uv |b|^2 + 2 W_uguv Re a* b
    """
    w, g, v, gg, vv, gv, uu, uv, ug = weights.T
    out = np.zeros((8, weights.shape[0], 5))
    aa, bb, dd, rab, iab, rad, iad, rbd = range(8)
    out[aa, :, 0] = w
    out[aa, :, 1], out[rab, :, 1], out[rad, :, 1] = g, v, w
    out[iab, :, 2], out[iad, :, 2] = v, w
    out[aa, :, 3], out[bb, :, 3], out[dd, :, 3] = gg, vv, w
    out[rab, :, 3], out[rad, :, 3], out[rbd, :, 3] = 2 * gv, 2 * g, 2 * v
    out[aa, :, 4], out[bb, :, 4], out[rab, :, 4] = uu, uv, 2 * ug
    return out


def chunk_rows(modes: int, series: int) -> int:
    """Times per block of the Duhamel recurrence: CHUNK_ELEMENTS amplitudes of `series`
    series over `modes` bright modes, but at least CHUNK_MIN_ROWS.

    Parameters
    ----------
    modes, series : int
        Bright modes M and series (1, or 3 with the slopes).

    Returns
    -------
    int
    """
    return max(CHUNK_MIN_ROWS, CHUNK_ELEMENTS // max(modes * series, 1))


def duhamel_rule(eigenvalues, step: float) -> tuple[int, int]:
    """Parts m of one grid step and Gauss-Legendre nodes q per part for the Duhamel recurrence.

    The integrand exp(i e_i s) c(t + s) oscillates at most at the spectral span
    W = max z_j - min z_j (the poles interlace with the roots).  The step is cut into
    m = ceil(W h / DUHAMEL_PHASE) equal parts, and each part gets the fewest nodes q whose rule
    integrates exp(i w s) over it within DUHAMEL_TOLERANCE of its length for every
    |w| h / m up to the part's phase (`_gauss_phase_limits`); the residues sum to 1, so that is
    also the bound on the integral of c.

    Parameters
    ----------
    eigenvalues : ndarray
        z_j (energy units).
    step : float
        Grid step h (time units).

    Returns
    -------
    parts : int
        m >= 1.
    nodes : int
        q, 1 .. DUHAMEL_NODES.
    """
    span = float(np.max(eigenvalues) - np.min(eigenvalues)) if eigenvalues.size else 0.0
    parts = max(1, math.ceil(span * step / DUHAMEL_PHASE))
    limits = _gauss_phase_limits()
    nodes = 1 + int(np.searchsorted(limits, span * step / parts))
    return parts, min(nodes, DUHAMEL_NODES)


def duhamel_quadrature(step: float, rule: tuple[int, int]):
    """Nodes s and weights of the Duhamel rule on [0, h]: q-point Gauss-Legendre on each of m
    equal parts, for Int_0^h F(s) ds ~ sum_r weight_r F(s_r).

    Parameters
    ----------
    step : float
        h (time units).
    rule : tuple of int
        (m, q) of `duhamel_rule`.

    Returns
    -------
    offsets, weights : ndarray, shape (m q,)
        s_r in [0, h] and their weights (time units).
    """
    parts, count = rule
    nodes, node_weights = np.polynomial.legendre.leggauss(count)
    part = step / parts
    offsets = (np.arange(parts)[:, None] + 0.5 * (nodes[None, :] + 1)).ravel() * part
    return offsets, np.tile(0.5 * part * node_weights, parts)


@functools.cache
def _gauss_phase_limits() -> np.ndarray:
    """theta_q for q = 1 .. DUHAMEL_NODES: the q-point Gauss-Legendre rule on [0, 1] integrates
    exp(i w s) within DUHAMEL_TOLERANCE for every |w| <= theta_q (rad; measured on a grid of
    phases against the closed form (exp(i w) - 1) / (i w); 13.3 rad for 13 nodes, 20.3 for 16).
    """
    phases = np.linspace(0.0, 1.1 * DUHAMEL_PHASE, 4097)[1:]
    exact = (np.exp(1j * phases) - 1) / (1j * phases)
    limits = np.zeros(DUHAMEL_NODES)
    for count in range(1, DUHAMEL_NODES + 1):
        nodes, weights = np.polynomial.legendre.leggauss(count)
        rule = np.exp(0.5j * np.outer(phases, nodes + 1)) @ (0.5 * weights)
        failing = np.abs(rule - exact) > DUHAMEL_TOLERANCE
        first = int(np.argmax(failing)) if failing.any() else phases.size
        limits[count - 1] = phases[first - 1] if first else 0.0
    return limits


def _grid_level_amplitudes(eigenvalues, residues, step: float, count: int, offsets) -> np.ndarray:
    """c(n h + s_r) = sum_j w_j exp(-i z_j (n h + s_r)) for n < count and every offset s_r.

    With n = a B + b (B ~ sqrt(count)) the phase factorises exactly,
    exp(-i z (a B h)) x exp(-i z b h) x exp(-i z s_r): the first two are tables of
    `_grid_phases`, the last M R exponentials, and c is one blocked (A x M) @ (M x B R) product.

    Returns
    -------
    ndarray, shape (count, R)
        c at the nodes (complex, dimensionless).
    """
    inner = math.isqrt(max(count - 1, 0)) + 1
    outer = -(-count // inner)
    amplitude = np.zeros((outer, inner * offsets.size), dtype=complex)
    for roots in _blocks(eigenvalues.size, outer + inner * offsets.size):
        z = eigenvalues[roots]
        late = _grid_phases(z, step * inner, outer) * residues[roots]
        # exp(-i z (b h + s_r)) = exp(-i z b h) exp(-i z s_r), in row b R + r
        steps, nodes = _grid_phases(z, step, inner), _unit_phases(np.outer(offsets, z))
        amplitude += late @ (steps[:, None, :] * nodes[None, :, :]).reshape(-1, z.size).T
    return amplitude.reshape(outer * inner, offsets.size)[:count]


def _grid_phases(frequencies, step: float, count: int) -> np.ndarray:
    """exp(-i z n dt) for n = 0 .. count - 1 and each frequency z, shape (count, Z).

    With n = a S + b, S = isqrt(count - 1) + 1, the entry is the product
    exp(-i z a S dt) x exp(-i z b dt) of two exponentials from `_unit_phases`: about
    2 sqrt(count) exponentials per frequency and one rounding more per entry (no recurrence in n).

    Parameters
    ----------
    frequencies : ndarray, shape (Z,)
        z (energy units).
    step : float
        dt (time units).
    count : int
        Number of grid times (>= 1).

    Returns
    -------
    ndarray, shape (count, Z)
        exp(-i z n dt) (complex, dimensionless).
    """
    inner = math.isqrt(max(count - 1, 0)) + 1
    outer = -(-count // inner)
    coarse = _unit_phases(np.outer((step * inner) * np.arange(outer), frequencies))
    fine = _unit_phases(np.outer(step * np.arange(inner), frequencies))
    return (coarse[:, None, :] * fine[None, :, :]).reshape(outer * inner, -1)[:count]


def _unit_phases(phases) -> np.ndarray:
    """exp(-i phi) = cos(phi) - i sin(phi) elementwise for real phases phi (rad).

    cos and sin are written straight into the real and imaginary parts: the complex exponential
    of a purely imaginary argument at about half its cost (measured).
    """
    phases = np.asarray(phases, dtype=float)
    unit = np.empty(phases.shape, dtype=complex)
    np.cos(phases, out=unit.real)
    np.sin(phases, out=unit.imag)
    np.negative(unit.imag, out=unit.imag)
    return unit


def level_amplitude(level_energy, mode_energies, couplings, times, *, modes=False):
    """Exact amplitude c(t) of the level in a star sector, at each of `times` (1D, any real t).

    c(t) = sum_j w_j exp(-i z_j t) over the roots z_j of the secular equation
    f(z) = z - E0 - sum_i b_i / (z - e_i) = 0, w_j = 1 / f'(z_j); with modes=True also
    c_k(t) = conj(g_k) sum_j w_j exp(-i z_j t) / (z_j - e_{i(k)}) (equation (A)).
    c_k(t) at all times costs O(N^2 T); for recoil observables at a few snapshot times build the
    decomposition once with `star_spectrum` and call its `mode_amplitudes(snapshot_times)`.

    Parameters
    ----------
    level_energy : float
        E0 (energy units).
    mode_energies : array_like, shape (N,)
        eps_k (energy units).
    couplings : array_like, shape (N,)
        g_k (energy units, complex allowed).
    times : array_like, shape (T,)
        Times (time units).
    modes : bool, optional
        Also return the mode amplitudes (default False).

    Returns
    -------
    ndarray or tuple of ndarray
        c(t), complex, shape (T,) (dimensionless); with modes=True (c(t), c_k(t)) with c_k of
        shape (T, N) (dimensionless).

    Raises
    ------
    ValueError
        If the energies and couplings are not finite 1D arrays of equal length, or `times` is
        not one-dimensional.

    References
    ----------
    G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318.
    """
    spectrum = star_spectrum(level_energy, mode_energies, couplings)
    amplitude = spectrum.level_amplitude(times)
    if modes:
        return amplitude, spectrum.mode_amplitudes(times)
    return amplitude


def star_spectrum(level_energy, mode_energies, couplings, *, merge_rtol=MERGE_RTOL) -> StarSpectrum:
    """Eigen-decomposition of the star sector by the secular equation (S).

    The roots z_j of f(z) = z - E0 - sum_i b_i / (z - e_i) = 0 over the bright modes (e_i, b_i)
    and their residues w_j = 1 / f'(z_j).  Degenerate modes are merged first (`bright_modes`,
    relative tolerance merge_rtol).  Each root is converged to 4 ulp of its offset from its anchor
    pole (or to the rounding level of f itself where that is larger); `residue_sum` reports the
    norm check sum_j w_j = 1.

    Parameters
    ----------
    level_energy : float
        E0 (energy units).
    mode_energies : array_like, shape (N,)
        eps_k (energy units).
    couplings : array_like, shape (N,)
        g_k (energy units, complex allowed).
    merge_rtol : float, optional
        Relative degeneracy tolerance (dimensionless, default MERGE_RTOL).

    Returns
    -------
    StarSpectrum

    Raises
    ------
    ValueError
        If the energies and couplings are not finite 1D arrays of equal length.
    RuntimeError
        If a root does not converge in _MAX_STEPS iterations (`secular_roots`).

    References
    ----------
    G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318.
    Safeguarded root finding of secular equations as in divide-and-conquer eigensolvers: common
    practice.
    """
    energies, couplings = _as_bath(mode_energies, couplings)
    level_energy = float(level_energy)
    modes = bright_modes(energies, couplings, rtol=merge_rtol)
    anchor_energies, offsets, residues = secular_roots(level_energy, modes.energies, modes.weights)
    return StarSpectrum(level_energy, modes, couplings, anchor_energies, offsets, residues)


def bright_modes(mode_energies, couplings, *, rtol=MERGE_RTOL) -> BrightModes:
    """Merge (nearly) degenerate modes into bright modes; drop modes with zero coupling.

    Sorted energies form one group while consecutive gaps are <= rtol * max(max|eps_k|, g_bath),
    with g_bath = sqrt(sum_k |g_k|^2) the level's total coupling (so a group may span several
    such gaps).  A group acts as a single mode of energy sum |g_k|^2 eps_k / b and coupling
    sqrt(b), b = sum |g_k|^2 (the dark combinations decouple).  The replacement of each member's
    energy by the group mean shifts c_k(t) by at most ~ (energy spread of the group) x t; with
    the default rtol this is rounding-level for any physical run.

    Parameters
    ----------
    mode_energies : array_like, shape (N,)
        eps_k (energy units).
    couplings : array_like, shape (N,)
        g_k (energy units, complex allowed).
    rtol : float, optional
        Relative tolerance (dimensionless, default MERGE_RTOL).

    Returns
    -------
    BrightModes

    Raises
    ------
    ValueError
        If the energies and couplings are not finite 1D arrays of equal length.
    """
    energies, couplings = _as_bath(mode_energies, couplings)
    strengths = np.abs(couplings) ** 2
    coupled = np.flatnonzero(strengths > 0)
    order = coupled[np.argsort(energies[coupled], kind="stable")]
    sorted_energies = energies[order]
    scale = max(np.max(np.abs(sorted_energies), initial=0.0), np.sqrt(np.sum(strengths)))
    tolerance = rtol * scale
    group = np.cumsum(np.diff(sorted_energies, prepend=-np.inf) > tolerance) - 1
    weights = np.bincount(group, weights=strengths[order])
    mean_energies = np.bincount(group, weights=strengths[order] * sorted_energies) / weights
    member_of = np.full(energies.size, -1)
    member_of[order] = group
    return BrightModes(mean_energies, weights, member_of)


def secular_roots(level_energy, pole_energies, pole_weights):
    """All M + 1 roots of f(z) = z - E0 - sum_i b_i/(z - e_i) and their residues w = 1/f'(z).

    Root j is z_j = anchor + offset, anchored at the nearer end of its bracket (the outer roots
    at e_0 and e_{M-1}).  All brackets are solved at once by a safeguarded Newton-type iteration
    (`_local_model_step`) in the offset variable, with bisection whenever a step would leave the
    bracket.  The interior roots start at the bracket midpoint, where the sign of f picks the
    anchor; the outer roots start at the eigenvalue bounds min(E0, e_0) - sqrt(sum b) and
    max(E0, e_{M-1}) + sqrt(sum b) (Weyl's inequality for the diagonal plus the coupling part,
    whose norm is sqrt(sum b)).  The sums over the other poles come from `pole_sums_for`
    (direct, or near poles direct and far ones from Chebyshev interpolants for large M).

    Parameters
    ----------
    level_energy : float
        E0 (energy units).
    pole_energies : array_like, shape (M,)
        e_i, strictly increasing (energy units).
    pole_weights : array_like, shape (M,)
        b_i > 0 (energy^2).

    Returns
    -------
    anchor_energies : ndarray, shape (M + 1,)
        Anchor pole energy of each root (energy units); [E0] when M = 0.
    offsets : ndarray, shape (M + 1,)
        z_j - anchor (energy units).
    residues : ndarray, shape (M + 1,)
        w_j = 1 / f'(z_j) (dimensionless).

    Raises
    ------
    RuntimeError
        If some roots have not converged after _MAX_STEPS iterations.

    References
    ----------
    G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318 (the
    secular equation).  Safeguarded root finding as in divide-and-conquer eigensolvers: common
    practice.
    """
    level_energy = float(level_energy)
    poles = np.asarray(pole_energies, dtype=float)
    weights = np.asarray(pole_weights, dtype=float)
    if poles.size == 0:
        return np.array([level_energy]), np.zeros(1), np.ones(1)
    anchor, offset, far_end, low, high = _initial_brackets(level_energy, poles, weights)
    residues = np.empty_like(offset)
    active = np.arange(offset.size)
    pole_sums = pole_sums_for(poles, weights)
    for step_count in range(_MAX_STEPS):
        others = pole_sums(active, anchor[active], offset[active])
        value, slope_rest = _secular_terms(level_energy, poles, weights, anchor[active],
                                           offset[active], others)
        if step_count == 0:
            _anchor_midpoints_by_sign(value, slope_rest, weights, anchor, offset, far_end, low, high)
        current = offset[active]
        below = value < 0
        low[active] = np.where(below, current, low[active])
        high[active] = np.where(below, high[active], current)
        correction = _local_model_step(current, value, slope_rest, weights[anchor[active]], far_end[active])
        proposal = current + correction
        inside = ((low[active] < proposal) & (proposal < high[active])) | (proposal == current)
        proposal = np.where(inside, proposal, 0.5 * (low[active] + high[active]))
        offset[active] = proposal
        residues[active] = 1.0 / (slope_rest + weights[anchor[active]] / current**2)
        converged = (np.abs(proposal - current) <= _STEP_RTOL * np.abs(proposal)) | (value == 0)
        active = active[~converged]
        if active.size == 0:
            return poles[anchor], offset, residues
    raise RuntimeError(f"secular equation: {active.size} roots not converged in {_MAX_STEPS} steps")


def sector_lamb_shift(level_energy, mode_energies, couplings) -> float:
    """Discrete Lamb shift Delta = sum_k |g_k|^2 / (E0 - eps_k) of the sector (energy units).

    The discrete principal value: modes with eps_k exactly equal to E0 are left out.  It is the
    second-order energy shift of the level in the truncated bath (Rayleigh-Schroedinger
    perturbation theory; common practice).

    Parameters
    ----------
    level_energy : float
        E0 (energy units).
    mode_energies : array_like, shape (N,)
        eps_k (energy units).
    couplings : array_like, shape (N,)
        g_k (energy units, complex allowed).

    Returns
    -------
    float
        Delta (energy units).

    Raises
    ------
    ValueError
        If the energies and couplings are not finite 1D arrays of equal length.
    """
    energies, couplings = _as_bath(mode_energies, couplings)
    detuning = float(level_energy) - energies
    off_resonant = detuning != 0
    return float(np.sum(np.abs(couplings[off_resonant]) ** 2 / detuning[off_resonant]))


# --- secular-equation internals -------------------------------------------------------------------


def _initial_brackets(level_energy, poles, weights):
    """Anchor index, starting offset, far bracket end, and bracket [low, high] for each root.

    Offsets are z - poles[anchor].  Interior root j (between poles j-1 and j) starts at the
    midpoint, anchored at pole j-1, far end at the gap; the outer roots start at the Weyl bound.
    The factor 1.01 keeps the starting point outside the root despite rounding.
    """
    gaps = np.diff(poles)
    reach = 1.01 * np.sqrt(np.sum(weights))
    lowest = min(level_energy - poles[0], 0.0) - reach
    highest = max(level_energy - poles[-1], 0.0) + reach
    anchor = np.concatenate(([0], np.arange(poles.size - 1), [poles.size - 1]))
    offset = np.concatenate(([lowest], 0.5 * gaps, [highest]))
    far_end = np.concatenate(([-np.inf], gaps, [np.inf]))
    low = np.concatenate(([lowest], np.zeros(gaps.size), [0.0]))
    high = np.concatenate(([0.0], gaps, [highest]))
    return anchor, offset, far_end, low, high


def _anchor_midpoints_by_sign(value, slope_rest, weights, anchor, offset, far_end, low, high):
    """Re-anchor each interior root at the bracket end nearer to it, after the midpoint evaluation.

    f increases, so f(midpoint) <= 0 puts the root in the upper half of its gap: move the anchor to
    the upper pole, shifting offset and bracket by -gap, and swap the lower pole's term into
    slope_rest in place of the upper one's.  Arrays are updated in place (all roots are active at
    the first evaluation, so `value` and `slope_rest` are indexed like the roots).
    """
    interior = np.arange(1, anchor.size - 1)
    moved = interior[value[interior] <= 0]
    gap = far_end[moved]
    slope_rest[moved] += (weights[anchor[moved]] - weights[anchor[moved] + 1]) / (0.5 * gap) ** 2
    anchor[moved] += 1
    offset[moved] -= gap
    low[moved] -= gap
    high[moved] -= gap
    far_end[moved] = -gap


def _secular_terms(level_energy, poles, weights, anchor, offset, others):
    """f(z) and f'(z) - b_anchor/offset^2 at z = poles[anchor] + offset (equation (S)).

    others = (sum_{i != anchor} b_i/(z - e_i), sum_{i != anchor} b_i/(z - e_i)^2).  The anchor
    pole's term is kept apart so that the derivative of everything else carries no cancellation
    when the root sits very close to its anchor.
    """
    others, others_slope = others
    value = (poles[anchor] - level_energy) + offset - weights[anchor] / offset - others
    return value, 1.0 + others_slope


def _pole_sums(anchor, offset, poles, weights):
    """sum_{i != anchor} b_i/(z - e_i) and sum_{i != anchor} b_i/(z - e_i)^2, z = e_anchor + offset.

    Evaluated in row blocks of the Cauchy matrix: O(roots x poles) time, O(_BLOCK_ELEMENTS)
    memory.
    """
    first = np.empty(offset.size)
    second = np.empty(offset.size)
    for rows in _blocks(offset.size, poles.size):
        cauchy = _cauchy_block(poles[anchor[rows]], offset[rows], poles)
        cauchy[np.arange(cauchy.shape[0]), anchor[rows]] = 0.0
        first[rows] = cauchy @ weights
        second[rows] = np.square(cauchy, out=cauchy) @ weights
    return first, second


def pole_sums_for(poles, weights):
    """Evaluator of the pole sums of `secular_roots` for these poles.

    The evaluator maps (roots, anchor, offset) to (sum_{i != anchor} b_i/(z - e_i),
    sum_{i != anchor} b_i/(z - e_i)^2) at z = poles[anchor] + offset, for the roots of
    `secular_roots` (root j lies in the bracket (e_{j-1}, e_j)).  Below _PANEL_MIN_POLES poles
    every sum is direct (`_pole_sums`); above, `PanelledPoleSums`.

    Parameters
    ----------
    poles : ndarray, shape (M,)
        e_i, strictly increasing (energy units).
    weights : ndarray, shape (M,)
        b_i > 0 (energy^2).

    Returns
    -------
    callable
        (roots, anchor, offset) -> (first, second): first in energy units, second dimensionless,
        each of the shape of `offset`.
    """
    if poles.size < _PANEL_MIN_POLES:
        return lambda roots, anchor, offset: _pole_sums(anchor, offset, poles, weights)
    return PanelledPoleSums(poles, weights)


class PanelledPoleSums:
    """The pole sums of `secular_roots` split into near poles (direct) and far poles (Chebyshev).

    The interior roots are grouped in panels of consecutive brackets; panel p spans the interval
    I_p = [c - h, c + h] between its outer bracket ends.  Poles within _NEAR_REACH x h = 2h of
    I_p are *near* and summed directly (the anchor left out) at every evaluation; the others are
    at least 3h from c, so phi(z) = sum_far b_i/(z - e_i) and its companion
    sum_far b_i/(z - e_i)^2 are analytic inside the Bernstein ellipse rho = 3 + sqrt(8) of I_p
    and are replaced by their Chebyshev interpolants on _CHEBYSHEV_NODES first-kind nodes, built
    once from direct sums at the nodes.  The coefficients fall off like rho^-n: the interpolation
    error, ~ rho^-n times the sum of |b_i/(z - e_i)| (the scale of the direct sum's own
    rounding), is far below rounding (measured: roots and residues agree with the direct sums to
    ~3e-15 relative).  The outer two roots are summed directly.

    Work: O(M^2 n / P) once plus O(M P) per iteration (panel size P ~ 2 sqrt(M)), instead of
    O(M^2) per iteration.

    Parameters
    ----------
    poles : ndarray, shape (M,)
        e_i, strictly increasing (energy units).
    weights : ndarray, shape (M,)
        b_i > 0 (energy^2).

    References
    ----------
    L. N. Trefethen, Approximation Theory and Approximation Practice (SIAM 2013), ch. 8
    (Chebyshev interpolation error of a function analytic in a Bernstein ellipse).
    """

    def __init__(self, poles, weights):
        self.poles, self.weights = poles, weights
        size = max(2, math.ceil(_PANEL_SCALE * math.sqrt(poles.size)))
        self.starts = np.arange(1, poles.size, size)  # first interior root of each panel
        stops = np.minimum(self.starts + size, poles.size)
        lo, hi = poles[self.starts - 1], poles[stops - 1]
        self.centre, self.half = 0.5 * (hi + lo), 0.5 * (hi - lo)
        self.near_lo = np.searchsorted(poles, lo - _NEAR_REACH * self.half, side="left")
        self.near_hi = np.searchsorted(poles, hi + _NEAR_REACH * self.half, side="right")
        #: per panel, (nodes, 2): Chebyshev coefficients of both far sums
        transform = _chebyshev_transform()
        self.coefficients = np.array([
            _far_sum_coefficients(poles, weights, centre, half, near, transform)
            for centre, half, near in zip(self.centre, self.half,
                                          map(slice, self.near_lo, self.near_hi))])

    def __call__(self, roots, anchor, offset):
        """The two pole sums at z = poles[anchor] + offset, the anchor pole left out.

        Parameters
        ----------
        roots : ndarray of int, shape (R,)
            Root indices j = 0 .. M (0 and M are the outer roots, summed directly).
        anchor : ndarray of int, shape (R,)
            Index of each root's anchor pole.
        offset : ndarray, shape (R,)
            z - poles[anchor] (energy units).

        Returns
        -------
        first : ndarray, shape (R,)
            sum_{i != anchor} b_i / (z - e_i) (energy units).
        second : ndarray, shape (R,)
            sum_{i != anchor} b_i / (z - e_i)^2 (dimensionless).
        """
        first, second = np.empty(roots.size), np.empty(roots.size)
        interior = (roots > 0) & (roots < self.poles.size)
        outer = ~interior
        if outer.any():
            first[outer], second[outer] = _pole_sums(anchor[outer], offset[outer], self.poles,
                                                     self.weights)
        panel = np.searchsorted(self.starts, roots[interior], side="right") - 1
        position = self.poles[anchor[interior]] + offset[interior]
        chebyshev = np.polynomial.chebyshev.chebvander(
            (position - self.centre[panel]) / self.half[panel], _CHEBYSHEV_NODES - 1)
        rows = np.flatnonzero(interior)
        edges = np.searchsorted(panel, np.arange(self.starts.size + 1))
        for p in np.flatnonzero(np.diff(edges)):
            near = slice(self.near_lo[p], self.near_hi[p])
            for part in _blocks(edges[p + 1] - edges[p], near.stop - near.start):
                within = slice(edges[p] + part.start, edges[p] + part.stop)
                block = rows[within]
                cauchy = _cauchy_block(self.poles[anchor[block]], offset[block], self.poles[near])
                cauchy[np.arange(block.size), anchor[block] - near.start] = 0.0
                far = chebyshev[within] @ self.coefficients[p]
                first[block] = cauchy @ self.weights[near] + far[:, 0]
                second[block] = np.square(cauchy, out=cauchy) @ self.weights[near] + far[:, 1]
        return first, second


def _far_sum_coefficients(poles, weights, centre, half, near, transform):
    """Chebyshev coefficients, shape (_CHEBYSHEV_NODES, 2), of the two far-pole sums.

    sum_far b_i/(z - e_i) and sum_far b_i/(z - e_i)^2 on [centre - half, centre + half], the
    far poles being all but the slice `near` (their Cauchy entries zeroed, not subtracted),
    interpolated at the first-kind nodes x_m of `_chebyshev_transform` (which maps the values
    there to the coefficients).
    """
    nodes = _chebyshev_nodes()
    cauchy = _cauchy_block(centre + half * nodes, np.zeros(nodes.size), poles)
    cauchy[:, near] = 0.0
    values = np.stack([cauchy @ weights, np.square(cauchy, out=cauchy) @ weights], axis=1)
    return transform @ values


def _chebyshev_nodes() -> np.ndarray:
    """The first-kind Chebyshev nodes x_m = cos(pi (m + 1/2) / n), n = _CHEBYSHEV_NODES."""
    return np.cos(np.pi * (np.arange(_CHEBYSHEV_NODES) + 0.5) / _CHEBYSHEV_NODES)


def _chebyshev_transform() -> np.ndarray:
    """Values at `_chebyshev_nodes` -> Chebyshev coefficients, shape (n, n):
    c_k = (2 - [k = 0]) / n sum_m T_k(x_m) f(x_m) (Trefethen, Approximation Theory and
    Approximation Practice, ch. 8)."""
    nodes = _chebyshev_nodes()
    transform = (2.0 / nodes.size) * np.polynomial.chebyshev.chebvander(nodes, nodes.size - 1).T
    transform[0] *= 0.5
    return transform


def _local_model_step(offset, value, slope_rest, anchor_weight, far_end):
    """Correction u to the offset x from a local model of f matching f and f' at x.

    Model: f(x + u) ~ f + b/x - b/(x + u) + s u / (1 - r u), with b the anchor weight,
    s = slope_rest and r = 1/(far_end - x): the anchor pole exactly, everything else as one pole
    at the far bracket end (r = 0, a straight line, for the outer brackets).  Its root is the
    small root of
        [s - r (f + b/x)] u^2 + [f (1 - r x) + f' x] u + f x = 0,     f' = s + b/x^2,
    which reduces to Newton's step on x f(x) as the curvature term vanishes.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        curvature = 1.0 / (far_end - offset)
        quadratic = slope_rest - curvature * (value + anchor_weight / offset)
        linear = value * (1.0 - curvature * offset) + (slope_rest + anchor_weight / offset**2) * offset
        constant = value * offset
        root_term = np.sqrt(np.maximum(linear**2 - 4.0 * quadratic * constant, 0.0))
        return -2.0 * constant / (linear + np.copysign(root_term, linear))


def _cauchy_block(anchor_energies, offsets, poles):
    """1 / (z_j - e_i) = 1 / ((anchor_j - e_i) + offset_j), shape (roots, poles) (energy^-1)."""
    block = np.subtract.outer(anchor_energies, poles)
    block += offsets[:, None]
    return np.divide(1.0, block, out=block)


def _blocks(count, row_length, elements=None):
    """Consecutive slices of range(count), each with at most elements / row_length rows
    (elements defaults to _BLOCK_ELEMENTS)."""
    size = max(1, (elements or _BLOCK_ELEMENTS) // max(row_length, 1))
    return [slice(start, min(start + size, count)) for start in range(0, count, size)]


def grid_from_zero(times) -> bool:
    """Whether `times` is a uniform grid t_n = n h from t = 0 (at least 4 times), on which the
    Duhamel recurrence and the amplitudes' slopes run (`StarSpectrum.mode_series`).

    Parameters
    ----------
    times : array_like
        Times (time units).

    Returns
    -------
    bool
    """
    grid = _uniform_grid(_as_times(times))
    return grid is not None and grid[0] == 0.0


def _uniform_grid(times):
    """(t_0, dt, B) when times[n] = t_0 + n dt to rounding (B = ceil(sqrt(T)), the inner block
    of `StarSpectrum.level_amplitude`), else None (fewer than 4 times, or not evenly spaced)."""
    if times.size < 4:
        return None
    start, step = times[0], (times[-1] - times[0]) / (times.size - 1)
    grid = start + step * np.arange(times.size)
    if np.max(np.abs(grid - times)) > _GRID_RTOL * np.max(np.abs(times)):
        return None
    return float(start), float(step), math.isqrt(times.size - 1) + 1


def _as_bath(mode_energies, couplings):
    """Validated 1D float energies and complex couplings of equal length."""
    energies = np.asarray(mode_energies, dtype=float)
    couplings = np.asarray(couplings, dtype=complex)
    if energies.ndim != 1 or energies.shape != couplings.shape:
        raise ValueError("mode_energies and couplings must be 1D arrays of equal length")
    if not (np.all(np.isfinite(energies)) and np.all(np.isfinite(couplings))):
        raise ValueError("mode energies and couplings must be finite")
    return energies, couplings


def _as_times(times):
    """Validated 1D float array of times."""
    times = np.asarray(times, dtype=float)
    if times.ndim != 1:
        raise ValueError("times must be a 1D array")
    return times
