"""The sweep: every candidate power-of-two scale of a tensor, judged from one joint histogram.

For each candidate ``2^k`` the sweep gives what ``scan(x, fmt, scale=2^k)`` would count and
measure — overflow, underflow to zero, subnormal results, the relative-error p99 and the SQNR
over the values whose result is finite — plus the finite values the cast turns into NaN or
Inf (``nonfinite``), without casting the data again (``joint.py`` says why one pass is
enough). Counts are exact. The SQNR is exact up to floating-point rounding of the sums: each
coarse bin's squared error is ``n d^2 - 2 d w sum(U) + w^2 sum(U^2)`` for its rounded offset
``d``, with the three sums taken in the pass. The p99 is within the bound of ``quantile.py``.

The errors are measured against the data itself (``x`` against ``q / 2^k``), which for a
power-of-two scale is the same SQNR and relative error as the scan's, measured against the
scaled data. Binade ``e`` contributes ``4^e`` times its relative squared error; the sums are
taken relative to the top binade so that neither end of float64 is reached.

Candidates placed where a whole block of binades behaves alike share one computation: the
interior exponents (``emin .. emax-1``) give every bin the same relative result, so their
figures are the same numbers, and equal candidates tie exactly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ...display import Plottable
from ...errors import BitprismError
from ...formats import Format
from ...numerics.options import CastOptions
from .joint import JointHistogram
from .outcomes import Outcomes, outcomes
from .quantile import FineQuantiles, p99_tolerance

__all__ = ["OBJECTIVES", "ScaleSweep", "TIE_DB", "candidate_range", "sqnr_db", "sweep_histogram"]

OBJECTIVES = ("sqnr", "no_overflow", "amax")
TIE_DB = 1e-9  # SQNRs this close are equal (noise sums agree to ~1e-10 relative)
_KINDS = ("overflow", "underflow", "subnormal", "nonfinite")


@dataclass(frozen=True, eq=False)
class ScaleSweep(Plottable):
    """Every candidate power-of-two scale with what the cast does at it (one entry per
    candidate, arrays aligned with ``exponents``).

    Attributes:
        format, options: the cast.
        exponents: int64; the candidate ``k`` of the scale ``2^k`` or, when ``relative_to`` is
            not ``"none"``, the offset ``k`` added to every group's own base exponent.
        relative_to: ``"none"``, ``"channel amax rule"`` or ``"block MX rule"``.
        overflow, underflow, subnormal: int64 counts, as ``scan`` counts them.
        nonfinite: finite values whose result is NaN or Inf (left out of the error figures).
        compared: values whose input and result are finite (the error figures cover them).
        rel_error_p99: float64 (NaN when nothing is compared); within ``p99_tolerance``.
        sqnr_db: float64 over the compared values (Inf: no error; NaN: nothing compared).
        size: elements of the tensor; ``finite``: its finite elements.
        fine_bits: significand bits of the fine bins (the p99's resolution).
    """

    format: Format
    options: CastOptions
    exponents: np.ndarray
    overflow: np.ndarray
    underflow: np.ndarray
    subnormal: np.ndarray
    nonfinite: np.ndarray
    compared: np.ndarray
    rel_error_p99: np.ndarray
    p99_tolerance: np.ndarray
    sqnr_db: np.ndarray
    size: int
    finite: int
    fine_bits: int
    relative_to: str = "none"

    def __len__(self) -> int:
        return int(self.exponents.size)

    def index(self, k: int) -> int:
        """Position of candidate ``k`` in the arrays."""
        hits = np.flatnonzero(self.exponents == k)
        if not hits.size:
            lo, hi = int(self.exponents[0]), int(self.exponents[-1])
            raise BitprismError(f"k must be a candidate of this sweep ({lo}..{hi}); got {k!r}")
        return int(hits[0])

    def fraction(self, kind: str) -> np.ndarray:
        """Share of all elements per candidate: overflow, underflow, subnormal, nonfinite."""
        if kind not in _KINDS:
            raise BitprismError(f"kind must be one of {', '.join(_KINDS)}; got {kind!r}")
        counts = getattr(self, kind)
        return counts / self.size if self.size else np.zeros(counts.shape)

    def row(self, k: int) -> dict[str, Any]:
        """The figures of candidate ``k`` as a dict of plain numbers."""
        i = self.index(k)
        return {
            "k": int(self.exponents[i]),
            "overflow": int(self.overflow[i]),
            "underflow": int(self.underflow[i]),
            "subnormal": int(self.subnormal[i]),
            "nonfinite": int(self.nonfinite[i]),
            "rel_error_p99": float(self.rel_error_p99[i]),
            "sqnr_db": float(self.sqnr_db[i]),
        }

    def feasible(self, objective: str) -> np.ndarray:
        """Candidates an objective may choose: no finite value made NaN or Inf, and for
        ``"no_overflow"`` no overflow either."""
        ok = self.nonfinite == 0
        if objective == "no_overflow":
            ok &= self.overflow == 0
        return ok

    def best(self, objective: str, prefer: int | None = None) -> int | None:
        """Index of the candidate with the highest SQNR among the feasible ones, None if none
        is. SQNRs within ``TIE_DB`` of the highest tie (they differ by rounding only: the sums
        are exact to about 1e-12); a tie goes to ``prefer`` (the amax rule's exponent) when it
        is among them, else to the smallest scale, which leaves the most headroom above."""
        if objective not in ("sqnr", "no_overflow"):
            raise BitprismError(f"objective must be 'sqnr' or 'no_overflow' here; got {objective!r}")
        ok = self.feasible(objective) & ~np.isnan(self.sqnr_db)
        if not ok.any():
            return None
        score = np.where(ok, self.sqnr_db, -np.inf)
        top = score.max()
        tied = ok & (score >= top - TIE_DB) if np.isfinite(top) else ok & (score == top)
        if prefer is not None and np.any(tied & (self.exponents == prefer)):
            return self.index(prefer)
        return int(np.flatnonzero(tied)[0])


def _coarse_geometry(t: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Per coarse column: lower edge ``1.b`` (relative), the sign (+1/-1), the bin width."""
    c = np.arange(1 << (t + 2))
    w = 2.0 ** -(t + 1)
    return 1.0 + (c >> 1) * w, np.where(c & 1, -1.0, 1.0), w


@dataclass
class _Terms:
    """Per binade (rows) and column: noise, signal and the four counts."""

    noise: np.ndarray
    signal: np.ndarray
    counts: dict[str, np.ndarray]


def _columns(oc: Outcomes) -> tuple[np.ndarray, np.ndarray]:
    """(tabulated rows computed, column of every tabulated exponent): the interior exponents
    share one column, so that equal candidates tie exactly."""
    lo, hi = oc.interior
    fs = np.arange(oc.f_lo, oc.f_hi + 1)
    keep = (fs < lo) | (fs >= hi + 1) | (fs == lo)
    col = np.cumsum(keep) - 1
    return np.flatnonzero(keep), col


def _explicit_terms(h: JointHistogram, oc: Outcomes, rows: np.ndarray) -> _Terms:
    """Noise, signal and counts of each binade at each tabulated exponent, one matrix product
    per term (columns as ``_columns`` lays them out). Products by ``einsum``, not BLAS: the
    same sums in the same order on every machine, and no thread pool for small matrices."""
    edge, sign, w = _coarse_geometry(h.t)
    n_w, ex_w = (a[rows] for a in h.weighted_counts())
    st_w = n_w - ex_w
    a_sum, q_sum = h.coarse_sum[rows], h.coarse_sq[rows]
    used, _ = _columns(oc)
    fs = oc.f_lo + used
    rel = np.ldexp(oc.value[used], -fs[:, None, None])  # [f, s, C]
    fin = ~oc.nonfinite[used]
    d = np.where(fin, sign * np.where(fin, rel, 0.0) - edge, 0.0)  # rounded offset, along x's sign
    finf = fin.astype(np.float64)

    def m(rc: np.ndarray, fc: np.ndarray) -> np.ndarray:  # [rows, C] x [f, C] -> [rows, f]
        return np.einsum("rc,fc->rf", rc, np.ascontiguousarray(fc))

    noise = m(ex_w, d[:, 0] ** 2) + m(st_w, d[:, 1] ** 2) - 2 * w * m(a_sum, d[:, 1])
    noise += w * w * m(q_sum, finf[:, 1])
    signal = m(ex_w, edge**2 * finf[:, 0]) + m(st_w, edge**2 * finf[:, 1])
    signal += 2 * w * m(a_sum, edge * finf[:, 1]) + w * w * m(q_sum, finf[:, 1])
    n_all, n_ex = (a[rows] for a in h.edge_counts())
    n_st = n_all - n_ex
    counts = {}
    for kind in _KINDS:
        flag = getattr(oc, kind)[used].astype(np.float64)
        counts[kind] = np.rint(m(n_ex, flag[:, 0]) + m(n_st, flag[:, 1])).astype(np.int64)
    return _Terms(np.maximum(noise, 0.0), signal, counts)


def _edge_quadratic(
    h: JointHistogram, oc: Outcomes, rows: np.ndarray, at: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Beyond the table the codes stay those of the end row ``at``: with ``lam = 2^(f_end -
    f)`` the relative result is ``r * lam`` and the squared error ``lam^2 a - 2 lam b + c``."""
    edge, sign, w = _coarse_geometry(h.t)
    n_w, ex_w = (a[rows] for a in h.weighted_counts())
    st_w = n_w - ex_w
    a_sum, q_sum = h.coarse_sum[rows], h.coarse_sq[rows]
    f_end = oc.f_lo + at
    fin = ~oc.nonfinite[at]
    r = np.where(fin, np.ldexp(np.where(fin, oc.value[at], 0.0), -f_end), 0.0) * sign  # [s, C]
    finf = fin.astype(np.float64)

    def v(rc: np.ndarray, c: np.ndarray) -> np.ndarray:  # [rows, C] x [C] -> [rows]
        return np.einsum("rc,c->r", rc, c)

    qa = v(ex_w, r[0] ** 2) + v(st_w, r[1] ** 2)
    qb = v(ex_w, r[0] * edge) + v(st_w, r[1] * edge) + w * v(a_sum, r[1])
    qc = v(ex_w, edge**2 * finf[0]) + v(st_w, edge**2 * finf[1]) + 2 * w * v(a_sum, edge * finf[1])
    qc += w * w * v(q_sum, finf[1])
    return qa, qb, qc


def sweep_histogram(
    h: JointHistogram, fmt: Format, options: CastOptions, ks: np.ndarray, relative_to: str = "none"
) -> ScaleSweep:
    """The figures of every candidate exponent ``ks`` (ascending ints) for histogram ``h``."""
    oc = outcomes(fmt, options)
    ks = np.asarray(ks, dtype=np.int64)
    rows = h.populated
    e = h.e_lo + rows
    terms = _explicit_terms(h, oc, rows)
    f = e[:, None] + ks[None, :]  # [rows, K]
    col = _columns(oc)[1][np.clip(f, oc.f_lo, oc.f_hi) - oc.f_lo]
    r_idx = np.arange(rows.size)[:, None]
    noise, signal = terms.noise[r_idx, col], terms.signal[r_idx, col]
    sides = [(at, side) for at, side in ((0, f < oc.f_lo), (oc.f_hi - oc.f_lo, f > oc.f_hi)) if side.any()]
    quads = {at: _edge_quadratic(h, oc, rows, at) for at, _ in sides}
    for at, side in sides:
        signal = np.where(side, quads[at][2][:, None], signal)
    # each candidate's sums are taken relative to its top binade with a finite result
    live = np.where(signal > 0, e[:, None], np.iinfo(np.int64).min)
    top = live.max(axis=0) if e.size else np.zeros(ks.size, np.int64)
    top = np.where(top == np.iinfo(np.int64).min, 0, top)
    rel = 2 * (e[:, None] - top[None, :])  # binade e weighs 4^(e - top)
    noise, signal = np.ldexp(noise, rel), np.ldexp(signal, rel)
    for at, side in sides:
        qa, qb, qc = quads[at]
        d = np.where(side, (oc.f_lo + at) - f, 0)  # lam = 2^d
        with np.errstate(over="ignore", invalid="ignore"):  # a huge error is Inf noise
            quad = (np.ldexp(qa[:, None], 2 * d + rel) - 2 * np.ldexp(qb[:, None], d + rel)
                    + np.ldexp(qc[:, None], rel))
        quad = np.where(np.isnan(quad), np.inf, quad)
        noise = np.where(side, np.maximum(quad, 0.0), noise)
    noise_sum = noise.sum(axis=0)
    signal_sum = signal.sum(axis=0)
    counts = {kind: terms.counts[kind][r_idx, col].sum(axis=0) for kind in _KINDS}
    zeros = h.zeros
    compared = h.finite - counts["nonfinite"]
    with np.errstate(divide="ignore", invalid="ignore"):
        sqnr = np.where(
            noise_sum == 0, np.inf,
            np.where(signal_sum > 0, 10 * np.log10(signal_sum / noise_sum), -np.inf),
        )
    sqnr = np.where(compared > 0, sqnr, np.nan)
    fq = FineQuantiles(h, oc, rows)
    p99 = np.array([fq.p99(int(k), zeros) for k in ks]) if ks.size else np.zeros(0)
    tol = p99_tolerance(p99, h.fine_bits)
    return ScaleSweep(
        format=fmt,
        options=options,
        exponents=ks,
        overflow=counts["overflow"],
        underflow=counts["underflow"],
        subnormal=counts["subnormal"],
        nonfinite=counts["nonfinite"],
        compared=compared,
        rel_error_p99=p99,
        p99_tolerance=tol,
        sqnr_db=sqnr,
        size=h.size,
        finite=h.finite,
        fine_bits=h.fine_bits,
        relative_to=relative_to,
    )


def candidate_range(h: JointHistogram, fmt: Format, k_amax: int) -> np.ndarray:
    """Candidates from the scale at which every value underflows to the one at which every
    value overflows, always including ``k_amax`` and 0, inside the range where the scale is a
    normal float64 and the scaled data keeps every bit (``x * 2^k`` exact in float64)."""
    rows = h.populated
    if not rows.size:
        return np.zeros(1, np.int64)
    e_lo, e_hi = h.e_lo + int(rows[0]), h.e_lo + int(rows[-1])
    t = fmt.significand_bits
    lo = min(k_amax, 0, fmt.emin - t - 2 - e_hi)
    hi = max(k_amax, 0, fmt.emax + 1 - e_lo)
    lo = max(lo, min(0, -1022 - e_lo), -1022)  # scaling down keeps every bit: x 2^k normal
    hi = min(hi, 1023 - e_hi, 1023)  # scaling up keeps x 2^k finite
    return np.arange(lo, hi + 1, dtype=np.int64)


def sqnr_db(signal: float, noise: float) -> float:
    """The scan's SQNR of two sums (Inf without error, -Inf without signal)."""
    if noise == 0:
        return math.inf
    return 10 * math.log10(signal / noise) if signal > 0 else -math.inf
