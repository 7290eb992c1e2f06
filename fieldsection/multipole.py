"""Fast sums of 2D line charges and dipoles at a few probe points: a quadtree with multipole expansions.

``LogPotentialSum(probes, ...)`` takes sources in chunks (``add``: positions, line charges and/or dipole
moments) and returns the potential at the probes (``potential``, up to a constant): the 2D free-space
Green's function -ln|r - r'| / (2 pi eps0) per unit line charge, and its normal derivative for a double
layer. Direct sums near each probe, expansions of order ``MULTIPOLE_ORDER`` farther away: time and memory
linear in the number of sources for a fixed set of probes. Used by ``superposition.py``.
"""

from __future__ import annotations

import copy
from functools import lru_cache
from math import comb

import numpy as np
from scipy.constants import epsilon_0

#: terms of the multipole expansion of a far cell (cells at least two cells away: ratio <= 0.47 per term)
MULTIPOLE_ORDER = 20
#: probe-source pairs summed directly at once (bounds the memory of the near field's blocks)
PAIRS_PER_BATCH = 1_000_000


class LogPotentialSum:
    """Re F(z) / (2 pi eps0) at the probes, F(z) = sum -q ln(z - w) + m / (w - z), over sources fed in chunks.

    A quadtree of square cells over the section, levels 2 .. ``depth`` (2^level cells a side, stored densely):
    sources in the probe's own and the eight neighbouring finest cells are summed directly; at every level
    the cells that are not neighbours of the probe's cell but whose parents neighbour its parent (at most 27)
    act through their multipole expansions, which are built on the finest level and shifted to the coarser
    ones (the expansion of ln about a new centre). A probe is at least 1.5 cell sizes from a far cell's
    centre and every source within 0.71 of it, so each term shrinks by 0.47 or more."""

    def __init__(self, probes: np.ndarray, lower: np.ndarray, upper: np.ndarray, where: np.ndarray, weight: float):
        """``where`` (2, n): points standing for the sources to come (element centroids), ``weight`` sources each."""
        self.z = probes[:, 0] + 1j * probes[:, 1]
        self.extent = float(max(upper - lower)) * (1 + 1e-9) or 1.0
        self.lower = lower
        self.depth = self._cheapest_depth(where, weight)
        n = 2 ** self.depth
        self.direct = np.zeros(len(probes))
        self.charge = np.zeros(n * n)
        self.moments = np.zeros((MULTIPOLE_ORDER, n * n), dtype=complex)
        self.count = 0

    def empty(self) -> "LogPotentialSum":
        """A sum without sources on the same probes and quadtree. ``potential`` is linear in the sources, so the
        potentials of sums over disjoint sources add up (a helper process sums half of them and sends back only
        its potential at the probes)."""
        other = copy.copy(self)
        other.direct, other.charge, other.moments = (np.zeros_like(a) for a in (self.direct, self.charge, self.moments))
        other.count = 0
        return other

    def _cheapest_depth(self, where: np.ndarray, weight: float) -> int:
        """The finest level (2 .. 9) with the least estimated work: direct pairs of the probes' neighbourhoods
        (from where the sources will lie) against the expansions' work, ~ 4^level cells x order^2."""
        best, cost = 2, np.inf
        finest = 9
        fine_i, fine_j = self._ij(where[0], where[1], finest)  # each coarser level's cells by a shift of these
        for level in range(2, finest + 1):  # eight levels, not a loop over the mesh
            n = 2 ** level
            i, j = fine_i >> (finest - level), fine_j >> (finest - level)
            count = np.bincount(i * n + j, minlength=n * n) * weight
            pi, pj = self._ij(self.z.real, self.z.imag, level)
            pairs = 0.0
            for di in (-1, 0, 1):
                for dj in (-1, 0, 1):
                    ni, nj = pi + di, pj + dj
                    ok = (ni >= 0) & (ni < n) & (nj >= 0) & (nj < n)
                    pairs += count[ni[ok] * n + nj[ok]].sum()
            estimate = 10.0 * pairs + where.shape[1] * weight * MULTIPOLE_ORDER + n * n * MULTIPOLE_ORDER**2
            if estimate < cost:
                best, cost = level, estimate
        return best

    def _ij(self, x: np.ndarray, y: np.ndarray, level: int) -> tuple[np.ndarray, np.ndarray]:
        n = 2 ** level
        size = self.extent / n
        i = np.clip(np.floor((x - self.lower[0]) / size).astype(np.int64), 0, n - 1)
        j = np.clip(np.floor((y - self.lower[1]) / size).astype(np.int64), 0, n - 1)
        return i, j

    def _centre(self, i: np.ndarray, j: np.ndarray, level: int) -> np.ndarray:
        size = self.extent / 2 ** level
        return (self.lower[0] + (i + 0.5) * size) + 1j * (self.lower[1] + (j + 0.5) * size)

    def add(self, w: np.ndarray, q: np.ndarray | None, m: np.ndarray | None = None) -> None:
        """Sources at w: line charges q (C/m) and/or double-layer moments m (complex, C), either may be None."""
        if w.size == 0:
            return
        self.count += w.size
        level = self.depth
        n = 2 ** level
        size = self.extent / n
        i, j = self._ij(w.real, w.imag, level)
        cells = i * n + j
        order = np.argsort(cells, kind="stable")
        w, cells, i, j = w[order], cells[order], i[order], j[order]
        q = None if q is None else q[order]
        m = None if m is None else m[order]
        if q is not None:
            self.charge += np.bincount(cells, q, n * n)
        zeta = (w - self._centre(i, j, level)) / size
        # term k: (sum of q zeta^k) / k - sum of (m / size) zeta^(k - 1), each sum over a cell's run of sources
        # (the 1/k once per cell, not per source); one term at a time: a few arrays of the sources' size, not one
        # per term
        first = np.flatnonzero(np.r_[True, cells[1:] != cells[:-1]])
        target = cells[first]
        power = None if q is None else zeta * q  # q zeta^k, built up term by term in place
        shifted = None if m is None else m / size  # (m / size) zeta^(k - 1)
        for k in range(1, MULTIPOLE_ORDER + 1):
            moment = np.zeros(target.size, dtype=complex)
            if power is not None:
                if k > 1:
                    power *= zeta
                moment += np.add.reduceat(power, first) / k
            if shifted is not None:
                if k > 1:
                    shifted *= zeta
                moment -= np.add.reduceat(shifted, first)
            self.moments[k - 1, target] += moment
        self._add_direct(w, q, m, cells)

    def _add_direct(self, w, q, m, cells) -> None:
        """Direct sums over the sources (sorted by cell) in the nine finest cells around each probe: per cell that
        holds probes, its probes against the sources of the three rows of three cells around it (each row one
        contiguous run of the sorted sources), as small dense blocks (a loop over the probes' cells, at most
        one per probe: they stay in cache, where gathering every probe-source pair did not)."""
        n = 2 ** self.depth
        counts = np.bincount(cells, minlength=n * n)
        ends = np.cumsum(counts)
        starts = ends - counts
        pi, pj = self._ij(self.z.real, self.z.imag, self.depth)
        cell_of_probe = pi * n + pj
        order = np.argsort(cell_of_probe, kind="stable")
        groups = np.split(order, np.flatnonzero(np.diff(cell_of_probe[order])) + 1)
        for group in groups:  # the probes' cells, not the mesh
            i, j = int(pi[group[0]]), int(pj[group[0]])
            low, high = max(j - 1, 0), min(j + 1, n - 1)
            runs = [(starts[r * n + low], ends[r * n + high]) for r in range(max(i - 1, 0), min(i + 1, n - 1) + 1)]
            runs = [(a, b) for a, b in runs if b > a]
            if not runs:
                continue
            ws = np.concatenate([w[a:b] for a, b in runs])
            qs = None if q is None else np.concatenate([q[a:b] for a, b in runs])
            ms = None if m is None else np.concatenate([m[a:b] for a, b in runs])
            rows = max(1, PAIRS_PER_BATCH // ws.size)  # probes at once: bounded memory
            for first in range(0, group.size, rows):
                self._block(group[first:first + rows], ws, qs, ms)

    def _block(self, probes, ws, qs, ms) -> None:
        """Direct sums of sources ``ws`` (charges ``qs``, moments ``ms``, either may be None) at ``probes``; a
        source on a probe adds nothing (its own point, where the potential is integrable)."""
        d = ws[None, :] - self.z[probes, None]
        r2 = d.real * d.real + d.imag * d.imag
        on_probe = r2 == 0
        r2[on_probe] = 1.0  # ln 1 = 0, and its moment term is zeroed below
        if qs is not None:  # -q ln r = -q ln(r^2) / 2
            self.direct[probes] -= 0.5 * (np.log(r2) @ qs)
        if ms is not None:  # Re(m / d) = Re(m conj(d)) / r^2
            inverse = np.where(on_probe, 0.0, 1.0 / r2)
            self.direct[probes] += (d.real * inverse) @ ms.real + (d.imag * inverse) @ ms.imag

    def _far(self, level: int, charge: np.ndarray, moments: np.ndarray) -> np.ndarray:
        """The interaction list's contribution at ``level``, per probe."""
        n = 2 ** level
        size = self.extent / n
        pi, pj = self._ij(self.z.real, self.z.imag, level)
        out = np.zeros(len(self.z))
        for a in range(-2, 4):  # children of the parent's neighbours: six cells a side
            for b in range(-2, 4):
                ci, cj = 2 * (pi // 2) + a, 2 * (pj // 2) + b
                use = (ci >= 0) & (ci < n) & (cj >= 0) & (cj < n) & ((np.abs(ci - pi) > 1) | (np.abs(cj - pj) > 1))
                if not use.any():
                    continue
                cell = ci[use] * n + cj[use]
                omega = (self.z[use] - self._centre(ci[use], cj[use], level)) / size
                inverse = 1.0 / omega
                series = np.zeros(omega.shape, dtype=complex)
                for k in range(MULTIPOLE_ORDER, 0, -1):  # Horner in 1/omega
                    series = (series + moments[k - 1, cell]) * inverse
                out[use] += -charge[cell] * (np.log(np.abs(omega)) + np.log(size)) + series.real
        return out

    def _to_parent(self, level: int, charge: np.ndarray, moments: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Shift the expansions of ``level`` to the centres of their parents (one level coarser): the four
        children of a parent sit at the four fixed offsets (+-1 +- 1j) / 4 parent sizes from its centre, so
        the shift is one fixed matrix per child position, applied to the cells in use at once (a matrix
        product; each parent has one child per position, so no two of them land on the same parent)."""
        n = 2 ** level
        half = n // 2
        used = np.flatnonzero((charge != 0) | (moments != 0).any(axis=0))
        i, j = np.divmod(used, n)
        parent = (i // 2) * half + j // 2
        position = 2 * (i % 2) + j % 2
        parent_moments = np.zeros((MULTIPOLE_ORDER, half * half), dtype=complex)
        for a in (0, 1):
            for b in (0, 1):
                mine = position == 2 * a + b
                shift, from_charge = _child_shift((a - 0.5) / 2 + 1j * (b - 0.5) / 2, MULTIPOLE_ORDER)
                parent_moments[:, parent[mine]] += (shift @ moments[:, used[mine]]
                                                    + from_charge[:, None] * charge[used[mine]][None, :])
        return charge.reshape(half, 2, half, 2).sum(axis=(1, 3)).ravel(), parent_moments

    def potential(self) -> np.ndarray:
        """V at the probes (up to a constant), volts."""
        total = self.direct.copy()
        charge, moments = self.charge, self.moments
        for level in range(self.depth, 1, -1):
            total += self._far(level, charge, moments)
            if level > 2:
                charge, moments = self._to_parent(level, charge, moments)
        return total / (2 * np.pi * epsilon_0)


@lru_cache(maxsize=16)
def _child_shift(delta: complex, order: int) -> tuple[np.ndarray, np.ndarray]:
    """The expansion of ln about a centre moved by ``delta`` parent sizes, for a child half the parent's size:
    new[l] = Q delta^l / l + sum over k <= l of a[k] 0.5^k C(l - 1, k - 1) delta^(l - k), as (matrix on a,
    vector on Q), l and k from 1."""
    shift = np.zeros((order, order), dtype=complex)
    for l in range(1, order + 1):  # a small fixed matrix, not a loop over cells
        for k in range(1, l + 1):
            shift[l - 1, k - 1] = 0.5 ** k * comb(l - 1, k - 1) * delta ** (l - k)
    return shift, np.array([delta ** l / l for l in range(1, order + 1)])
