"""Stabilization diagram over model orders, and the choice of one pole per physical mode.

References:
    B. Peeters, H. Van der Auweraer, P. Guillaume, J. Leuridan, "The PolyMAX frequency-domain
    method: a new standard for modal parameter estimation?", Shock and Vibration 11, 2004
    (the stabilization diagram of a polyreference estimator: frequency, damping and
    participation vector compared with the previous order).
    R. J. Allemang, D. L. Brown, "A correlation coefficient for modal vector analysis",
    Proc. 1st IMAC, 1982 (MAC, here between participation vectors).
    SciPy, scipy.cluster.hierarchy.linkage / fcluster (agglomerative clustering).

Tolerances: 1 % in frequency, 5 % in damping and a participation-vector MAC of at least
0.98 between consecutive orders are the usual defaults of stabilization diagrams (common
practice; quoted from memory, not from a cited table).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.cluster.hierarchy import fcluster, linkage

from .plscf import PoleSet, damping_of, natural_freq_hz

__all__ = [
    "STABLE",
    "Chosen",
    "Diagram",
    "StabilityTolerances",
    "choose_automatic",
    "choose_picked",
    "diagram",
]

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]
IntArray = NDArray[np.int64]

# Status bits of a pole against the previous order.
FREQ_OK, DAMP_OK, VECTOR_OK = 1, 2, 4
STABLE = FREQ_OK | DAMP_OK | VECTOR_OK


@dataclass(frozen=True, slots=True)
class StabilityTolerances:
    """freq: relative frequency change; damping: relative damping change; mac: the least
    participation-vector MAC (between consecutive orders); min_share: the share of the
    orders (at least 3 poles) a cluster needs to stand for a physical mode; cluster_width:
    where clusters are cut in frequency, as a share of `freq` (0.2: 0.2 % by default)."""

    freq: float = 0.01
    damping: float = 0.05
    mac: float = 0.98
    min_share: float = 0.25
    cluster_width: float = 0.2

    def __post_init__(self) -> None:
        for name in ("freq", "damping"):
            value = getattr(self, name)
            if not 0.0 < value < 1.0:
                raise ValueError(f"stability tolerance {name} {value!r}; allowed 0 < x < 1")
        if not 0.0 < self.mac <= 1.0:
            raise ValueError(f"stability tolerance mac {self.mac!r}; allowed 0 < x <= 1")
        if not 0.0 < self.cluster_width <= 1.0:
            raise ValueError(f"cluster_width {self.cluster_width!r}; allowed 0 < x <= 1")
        if not 0.0 < self.min_share <= 1.0:
            raise ValueError(f"min_share {self.min_share!r}; allowed 0 < x <= 1")


@dataclass(frozen=True, slots=True)
class Diagram:
    """Every pole of every order, flattened (N poles in all).

    order: (N,) model order; s: (N,) complex pole, rad/s; participation: (N, R) unit
    vectors; status: (N,) bits FREQ_OK | DAMP_OK | VECTOR_OK against the previous order.
    """

    order: IntArray
    s: ComplexArray
    participation: ComplexArray
    status: IntArray

    @property
    def freq_hz(self) -> FloatArray:
        return natural_freq_hz(self.s)

    @property
    def damping_ratio(self) -> FloatArray:
        return damping_of(self.s)


@dataclass(frozen=True, slots=True)
class Chosen:
    """The chosen physical poles: s (K,) rad/s; multiplicity (K,) how many modes share the
    pole (2 for a repeated root seen by two references); members (K,) stable poles in its
    cluster (0 when picked by hand from the top order)."""

    s: ComplexArray
    multiplicity: IntArray
    members: IntArray


def _subspace_mac(v: ComplexArray, basis: ComplexArray) -> float:
    """Share of |v|² in the span of the rows of `basis` (MAC for one row)."""
    if basis.shape[0] == 1:
        w = basis[0]
        cross = abs(np.vdot(w, v)) ** 2
        return float(cross / max(float(np.vdot(w, w).real * np.vdot(v, v).real), 1e-300))
    q, _ = np.linalg.qr(basis.T)
    proj = q.conj().T @ v
    whole = float(np.vdot(v, v).real)
    return float(np.vdot(proj, proj).real) / max(whole, 1e-300)


def diagram(sets: Sequence[PoleSet], tol: StabilityTolerances) -> Diagram:
    """Classify each order's poles against the previous order's.

    Notes
    -----
    Pole p of order n is compared with the poles q of order n − 1 with
    |f_p − f_q| <= tol.freq · f_q (FREQ_OK when there is one); the nearest of them in
    frequency sets DAMP_OK (|ζ_p − ζ_q| <= tol.damping · ζ_q); VECTOR_OK when the share of
    the participation vector l_p in the span of those candidates' vectors is at least
    tol.mac. For one candidate that share is MAC(l_p, l_q); for a repeated root, whose
    two vectors at each order are any basis of one plane, it is the MAC against the plane.
    """
    orders, poles, parts, status = [], [], [], []
    prev: PoleSet | None = None
    for ps in sets:
        f, z = ps.freq_hz, ps.damping_ratio
        st = np.zeros(f.size, dtype=np.int64)
        if prev is not None and prev.s.size and f.size:
            fq, zq = prev.freq_hz, prev.damping_ratio
            rel = np.abs(f[:, None] - fq[None, :]) / fq[None, :]
            near = rel <= tol.freq
            for i in np.flatnonzero(near.any(axis=1)).tolist():
                cand = np.flatnonzero(near[i])
                best = cand[np.argmin(rel[i, cand])]
                bits = FREQ_OK
                if abs(z[i] - zq[best]) <= tol.damping * zq[best]:
                    bits |= DAMP_OK
                if _subspace_mac(ps.participation[i], prev.participation[cand]) >= tol.mac:
                    bits |= VECTOR_OK
                st[i] = bits
        orders.append(np.full(f.size, ps.order, dtype=np.int64))
        poles.append(ps.s)
        parts.append(ps.participation)
        status.append(st)
        prev = ps
    n_ref = sets[0].participation.shape[1] if sets else 1
    return Diagram(
        order=np.concatenate(orders) if orders else np.empty(0, np.int64),
        s=np.concatenate(poles) if poles else np.empty(0, np.complex128),
        participation=np.concatenate(parts) if parts else np.empty((0, n_ref), np.complex128),
        status=np.concatenate(status) if status else np.empty(0, np.int64),
    )


def choose_automatic(d: Diagram, tol: StabilityTolerances, n_ref: int) -> Chosen:
    """One pole per physical mode from the stable poles of the diagram.

    Notes
    -----
    The stable poles (all three bits) are clustered by average-linkage hierarchical
    clustering (scipy.cluster.hierarchy) on x = ln f / (tol.cluster_width · tol.freq) and
    y = ln ζ / tol.damping, cut at distance 1: 0.2 % in frequency or 5 % in damping by
    default. A mode's poles scatter far less in frequency over the orders than the
    tolerance between consecutive orders allows, and close modes (0.4 % apart, say) must
    stay apart; in damping they scatter more. A cluster stands
    for a physical mode when it has at least max(3, tol.min_share · number of orders)
    members; its pole is the member closest to the cluster's median (f, ζ) in that
    metric. Its multiplicity is the median number of members per order it appears in,
    at most the number of references: a repeated root gives two poles at every order
    when two references see it.
    """
    stable = np.flatnonzero(d.status == STABLE)
    n_orders = int(np.unique(d.order).size)
    need = max(3, math.ceil(tol.min_share * n_orders))
    empty = Chosen(np.empty(0, np.complex128), np.empty(0, np.int64), np.empty(0, np.int64))
    if stable.size < need:
        return empty
    f, z = d.freq_hz[stable], d.damping_ratio[stable]
    xy = np.column_stack(
        [np.log(f) / (tol.cluster_width * tol.freq), np.log(np.maximum(z, 1e-12)) / tol.damping]
    )
    labels = (
        fcluster(linkage(xy, method="average"), t=1.0, criterion="distance")
        if stable.size > 1
        else np.ones(1, dtype=np.int64)
    )
    poles, mult, members = [], [], []
    for lab in np.unique(labels):
        idx = np.flatnonzero(labels == lab)
        if idx.size < need:
            continue
        centre = np.median(xy[idx], axis=0)
        pick = idx[np.argmin(np.sum((xy[idx] - centre) ** 2, axis=1))]
        _, per_order = np.unique(d.order[stable[idx]], return_counts=True)
        poles.append(d.s[stable[pick]])
        mult.append(int(min(n_ref, max(1, round(float(np.median(per_order)))))))
        members.append(int(idx.size))
    order = np.argsort(np.abs(np.array(poles)))
    return Chosen(
        s=np.array(poles, dtype=np.complex128)[order],
        multiplicity=np.array(mult, dtype=np.int64)[order],
        members=np.array(members, dtype=np.int64)[order],
    )


def choose_picked(d: Diagram, picks_hz: Sequence[float], tol: StabilityTolerances) -> Chosen:
    """The poles nearest to named frequencies, Hz: for each, the stable pole of the highest
    order within 5 frequency tolerances (5 %) of it.

    Raises ValueError naming a frequency that no stable pole of the diagram comes near.
    """
    f = d.freq_hz
    stable = np.flatnonzero(d.status == STABLE)
    poles, members = [], []
    for target in picks_hz:
        near = stable[np.abs(f[stable] - target) <= 5.0 * tol.freq * target]
        if near.size == 0:
            raise ValueError(f"--pick {target:g} Hz: no stable pole within "
                             f"{500.0 * tol.freq:g} % of it at any order")  # fmt: skip
        top = near[d.order[near] == d.order[near].max()]
        best = top[np.argmin(np.abs(f[top] - target))]
        poles.append(d.s[best])
        members.append(int(near.size))
    order = np.argsort(np.abs(np.array(poles)))
    return Chosen(
        s=np.array(poles, dtype=np.complex128)[order],
        multiplicity=np.ones(len(poles), dtype=np.int64),
        members=np.array(members, dtype=np.int64)[order],
    )
