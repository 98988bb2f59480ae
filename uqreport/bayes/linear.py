"""The linear parameters of a likelihood: where they enter, their prior, the normal equations.

The readings y_j (j = 1..n) depend on P linear parameters beta through coefficients that
change with the nonlinear parameters of each of W walkers.  The readings come in contiguous
blocks (runs); all readings of block b use the same K columns of beta (:class:`BlockDesign`),
so the normal equations are sums over blocks, never a dense (n, P) matrix, and when the
prior does not couple blocks (:meth:`LinearPrior.for_design`) they split into small per-block
systems solved in closed form.  :mod:`.likelihoods` integrates beta out with these pieces.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
from numpy.typing import NDArray

__all__ = ["BlockDesign", "LinearFit", "LinearPrior"]

_LOG_2PI = float(np.log(2.0 * np.pi))


@dataclass(frozen=True)
class BlockDesign:
    """Where the linear parameters enter: readings in contiguous blocks.

    Attributes
    ----------
    starts:
        Index of the first reading of each block, shape (B,), increasing, ``starts[0] = 0``.
    columns:
        For each block the K linear parameters its readings depend on, shape (B, K); ``-1``
        marks a coefficient that is not used (a parameter fixed at zero).
    n_params:
        P, the number of linear parameters.
    n_readings:
        n, the number of readings.
    """

    starts: NDArray[np.intp]
    columns: NDArray[np.intp]
    n_params: int
    n_readings: int

    @cached_property
    def counts(self) -> NDArray[np.intp]:
        return np.diff(np.append(self.starts, self.n_readings))

    @cached_property
    def all_used(self) -> bool:
        """Whether every block uses all K coefficients (no column -1)."""
        return bool(np.all(self.columns >= 0))

    @cached_property
    def used_mask(self) -> NDArray[np.float64]:
        """(n, K): 1 where a reading's coefficient is used, 0 where its column is -1."""
        return np.repeat((self.columns >= 0).astype(float), self.counts, axis=0)

    @cached_property
    def reading_columns(self) -> NDArray[np.intp]:
        """(n, K) column of each reading's coefficients (P for an unused one)."""
        cols = np.where(self.columns < 0, self.n_params, self.columns)
        return np.repeat(cols, self.counts, axis=0)

    def normal_equations(
        self, coef: NDArray[np.float64], w: NDArray[np.float64], y: NDArray[np.float64]
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """C'WC (W, P, P), C'Wy (W, P) and y'Wy (W,) for coefficients (W, n, K)."""
        Wn = coef.shape[0]
        P = self.n_params
        prod = coef[..., :, None] * coef[..., None, :] * w[..., None, None]
        Sb = np.add.reduceat(prod, self.starts, axis=1)  # (W, B, K, K)
        rb = np.add.reduceat(coef * (w * y)[..., None], self.starts, axis=1)  # (W, B, K)
        yWy = np.sum(w * y * y, axis=1)
        S = np.zeros((Wn, P + 1, P + 1))
        r = np.zeros((Wn, P + 1))
        cols = np.where(self.columns < 0, P, self.columns)
        for b in range(cols.shape[0]):  # loop over blocks (runs), each vectorised over walkers
            c = cols[b]
            S[:, c[:, None], c[None, :]] += Sb[:, b]
            r[:, c] += rb[:, b]
        return S[:, :P, :P], r[:, :P], yWy

    def predict(self, coef: NDArray[np.float64], beta: NDArray[np.float64]) -> NDArray[np.float64]:
        """C beta, shape (W, n), for coefficients (W, n, K) and beta (W, P)."""
        ext = np.concatenate([beta, np.zeros((beta.shape[0], 1))], axis=1)
        return np.sum(coef * ext[:, self.reading_columns], axis=2)


@dataclass(frozen=True)
class LinearPrior:
    """Gaussian prior of the linear parameters; flat components have zero precision.

    Attributes
    ----------
    mean:
        Prior mean, shape (P,) or (W, P) (a mean that moves with a nonlinear parameter).
    precision:
        Prior precision matrix L, shape (P, P); rows and columns of flat components are 0.
    blocks, block_mean:
        Per-block precisions (B, K, K) and means (B, K) for the fast path, set by
        :meth:`for_design` (``None`` otherwise; ``block_mean`` is ``None`` when the mean
        moves per walker).
    """

    mean: NDArray[np.float64]
    precision: NDArray[np.float64]
    blocks: NDArray[np.float64] | None = None
    block_mean: NDArray[np.float64] | None = None

    @cached_property
    def block_terms(self) -> tuple[NDArray[np.float64], float] | None:
        """(L_b m_b (B, K), sum m'Lm) for a constant block mean, else ``None``."""
        if self.blocks is None or self.block_mean is None:
            return None
        Lm = np.einsum("bkl,bl->bk", self.blocks, self.block_mean)
        return Lm, float(np.sum(Lm * self.block_mean))

    @classmethod
    def flat(cls, n_params: int) -> LinearPrior:
        return cls(np.zeros(n_params), np.zeros((n_params, n_params)))

    def for_design(self, design: BlockDesign) -> LinearPrior:
        """This prior with its per-block precisions (B, K, K) attached when the design's
        blocks use distinct parameters and the prior does not couple blocks: the normal
        equations then split into small per-block systems (fast path)."""
        cols = design.columns
        used = cols[cols >= 0]
        if used.size != np.unique(used).size or used.size != design.n_params:
            return replace(self, blocks=None)
        owner = np.full(design.n_params, -1)
        for b in range(cols.shape[0]):
            owner[cols[b][cols[b] >= 0]] = b
        L = self.precision
        i, j = np.nonzero(L)
        if np.any(owner[i] != owner[j]):
            return replace(self, blocks=None)
        B, K = cols.shape
        blk = np.zeros((B, K, K))
        for b in range(B):
            for a in range(K):
                if cols[b, a] < 0:
                    blk[b, a, a] = 1.0  # an unused coefficient: a dummy parameter fixed at 0
                    continue
                for c in range(K):
                    if cols[b, c] >= 0:
                        blk[b, a, c] = L[cols[b, a], cols[b, c]]
        bm = None
        if self.mean.ndim == 1:
            bm = _block_mean(design, self.mean, 1)[0]
        return replace(self, blocks=blk, block_mean=bm)

    @property
    def rank(self) -> int:
        return int(np.linalg.matrix_rank(self.precision)) if self.precision.size else 0

    @cached_property
    def log_norm(self) -> float:
        """1/2 logdet+ L - rank/2 log 2 pi: the normalisation of the proper part."""
        if not np.any(self.precision):
            return 0.0
        w = np.linalg.eigvalsh(self.precision)
        w = w[w > 1e-12 * w.max()]
        return 0.5 * float(np.sum(np.log(w))) - 0.5 * w.size * _LOG_2PI

    def log_density(self, beta: NDArray[np.float64]) -> NDArray[np.float64]:
        """log prior of beta (W, P) up to nothing: normalised proper part, flat part 1."""
        d = beta - self.mean
        return -0.5 * np.einsum("wp,pq,wq->w", d, self.precision, d) + self.log_norm


def _block_sums(
    design: BlockDesign,
    coef: NDArray[np.float64],
    weights: tuple[NDArray[np.float64], ...],
    vectors: tuple[NDArray[np.float64], ...],
) -> tuple[list[NDArray[np.float64]], list[NDArray[np.float64]]]:
    """Per-block C'W_iC (W, B, K, K) for each weight W_i and C'v_j (W, B, K) for each
    vector v_j, all (W, n), in one reduceat."""
    K = coef.shape[2]
    iu = [(a, c) for a in range(K) for c in range(a, K)]
    parts = [coef[..., a] * coef[..., c] * w for w in weights for a, c in iu]
    parts += [coef[..., a] * v for v in vectors for a in range(K)]
    sums = np.add.reduceat(np.stack(parts, axis=2), design.starts, axis=1)  # (W, B, q)
    mats = []
    for i in range(len(weights)):
        S = np.empty((*sums.shape[:2], K, K))
        for q, (a, c) in enumerate(iu):
            S[..., a, c] = sums[..., i * len(iu) + q]
            S[..., c, a] = sums[..., i * len(iu) + q]
        mats.append(S)
    off = len(weights) * len(iu)
    vecs = [sums[..., off + j * K : off + (j + 1) * K] for j in range(len(vectors))]
    return mats, vecs


def _block_mean(design: BlockDesign, mean: NDArray[np.float64], W: int) -> NDArray[np.float64]:
    """Prior mean per block (W, B, K) (0 for unused coefficients)."""
    m = np.broadcast_to(mean, (W, design.n_params))
    ext = np.concatenate([m, np.zeros((W, 1))], axis=1)
    cols = np.where(design.columns < 0, design.n_params, design.columns)
    return ext[:, cols]


def _solve_small(
    S: NDArray[np.float64], r: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_]]:
    """Solve per-block systems S (W, B, K, K) x = r (W, B, K); closed form for K = 2.

    Returns x, the log determinant summed over blocks (W,), and which walkers failed (a
    block not positive definite)."""
    if S.shape[-1] == 2:
        a, b, d = S[..., 0, 0], S[..., 0, 1], S[..., 1, 1]
        det = a * d - b * b
        ok = (det > 0) & (a > 0)
        safe = np.where(ok, det, 1.0)
        x = np.stack(
            [(d * r[..., 0] - b * r[..., 1]) / safe, (a * r[..., 1] - b * r[..., 0]) / safe],
            axis=-1,
        )
        return x, np.sum(np.log(safe), axis=-1), ~np.all(ok, axis=-1)
    sign, ld = np.linalg.slogdet(S)
    ok = (sign > 0) & np.isfinite(ld)
    eye = np.broadcast_to(np.eye(S.shape[-1]), S.shape)
    Ssafe = np.where(ok[..., None, None], S, eye)
    x = np.linalg.solve(Ssafe, r[..., None])[..., 0]
    return x, np.sum(np.where(ok, ld, 0.0), axis=-1), ~np.all(ok, axis=-1)


def _scatter(design: BlockDesign, xb: NDArray[np.float64]) -> NDArray[np.float64]:
    """Per-block solutions (W, B, K) back to the parameter vector (W, P)."""
    W = xb.shape[0]
    beta = np.zeros((W, design.n_params + 1))
    cols = np.where(design.columns < 0, design.n_params, design.columns)
    beta[:, cols] = xb
    return beta[:, : design.n_params]


def _solve(
    S: NDArray[np.float64], r: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_]]:
    """beta = S^-1 r (dense, (W, P, P)), log det S, and which walkers failed."""
    sign, logdet = np.linalg.slogdet(S)
    bad = ~(sign > 0) | ~np.isfinite(logdet)
    if np.any(bad):
        S = S.copy()
        r = r.copy()
        S[bad] = np.eye(S.shape[1])
        r[bad] = 0.0
        logdet = np.where(bad, 0.0, logdet)
    beta = np.linalg.solve(S, r[..., None])[..., 0]
    return beta, logdet, bad


@dataclass(frozen=True)
class LinearFit:
    """The linear parameters given the nonlinear ones, per walker.

    Attributes
    ----------
    loglik:
        log of the likelihood integrated over beta (W,), ``-inf`` where it is undefined.
    beta:
        The conditional mode of beta (W, P) (the conditional mean for Gaussian errors).
    design:
        The design the fit belongs to.
    precision:
        The conditional precision of beta (W, P, P) (exact for Gaussian errors, the Fisher
        curvature for t errors), or ``None`` when held per block in ``blocks``.
    blocks:
        The same per block (W, B, K, K) on the fast path (unused coefficients carry a unit
        dummy precision), else ``None``.
    """

    loglik: NDArray[np.float64]
    beta: NDArray[np.float64]
    design: BlockDesign
    precision: NDArray[np.float64] | None = None
    blocks: NDArray[np.float64] | None = None

    def full_precision(self) -> NDArray[np.float64]:
        """The conditional precision as (W, P, P)."""
        if self.precision is not None:
            return self.precision
        d = self.design
        W = self.beta.shape[0]
        P = d.n_params
        H = np.zeros((W, P + 1, P + 1))
        cols = np.where(d.columns < 0, P, d.columns)
        for b in range(cols.shape[0]):  # loop over blocks
            c = cols[b]
            H[:, c[:, None], c[None, :]] = self.blocks[:, b]  # type: ignore[index]
        return H[:, :P, :P]

    def draw(self, rng: np.random.Generator) -> NDArray[np.float64]:
        """One draw of beta per walker from N(beta, precision^-1), shape (W, P)."""
        if self.blocks is not None:
            L = np.linalg.cholesky(self.blocks)
            z = rng.standard_normal(self.blocks.shape[:-1])
            dev = np.linalg.solve(np.swapaxes(L, -1, -2), z[..., None])[..., 0]
            return self.beta + _scatter(self.design, dev)
        L = np.linalg.cholesky(self.full_precision())
        z = rng.standard_normal(self.beta.shape)
        return self.beta + np.linalg.solve(np.swapaxes(L, -1, -2), z[..., None])[..., 0]


class _System:
    """The normal equations of one design and prior, on the block fast path or dense."""

    def __init__(
        self,
        design: BlockDesign,
        prior: LinearPrior,
        coef: NDArray[np.float64],
        y: NDArray[np.float64],
    ):
        self.design = design
        self.prior = prior
        self.y = y
        self.fast = prior.blocks is not None
        Wn = coef.shape[0]
        if self.fast:
            self.coef = coef * design.used_mask[None, :, :]
            self.L = prior.blocks
            if prior.block_mean is not None:
                self.m = np.broadcast_to(prior.block_mean, (Wn, *prior.block_mean.shape))
            else:
                self.m = _block_mean(design, prior.mean, Wn)
            self.Lm = np.einsum("bkl,wbl->wbk", self.L, self.m)
        else:
            self.coef = coef
            self.L = prior.precision
            self.m = np.broadcast_to(prior.mean, (Wn, design.n_params))
            self.Lm = self.m @ self.L.T
        self.mLm = np.sum(self.m * self.Lm, axis=tuple(range(1, self.m.ndim)))

    def solve(
        self, w: NDArray[np.float64]
    ) -> tuple[
        NDArray[np.float64],
        NDArray[np.float64],
        NDArray[np.float64],
        NDArray[np.float64],
        NDArray[np.float64],
        NDArray[np.bool_],
    ]:
        """(S + L, b, x, y'Wy, log det, bad) for weights w (W, n)."""
        if self.fast:
            wy = w * self.y
            (S,), (r,) = _block_sums(self.design, self.coef, (w,), (wy,))
            yWy = np.sum(wy * self.y, axis=1)
            S = S + self.L
            r = r + self.Lm
            x, logdet, bad = _solve_small(S, r)
        else:
            S, r, yWy = self.design.normal_equations(self.coef, w, self.y)
            S = S + self.L
            r = r + self.Lm
            x, logdet, bad = _solve(S, r)
        return S, r, x, yWy, logdet, bad

    def beta(self, x: NDArray[np.float64]) -> NDArray[np.float64]:
        return _scatter(self.design, x) if self.fast else x

    def steps(
        self,
        x: NDArray[np.float64],
        h_obs: NDArray[np.float64],
        h_alt: NDArray[np.float64],
        grad: NDArray[np.float64],
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """Two candidate steps for beta from one pass over the readings.

        Curvatures C'diag(h)C + L with weights ``h_obs`` (observed information) and
        ``h_alt`` (positive: EM or Fisher), gradient C'grad - L(x - m).  Returns (x after a
        Newton step with the observed curvature where it is positive definite, else the
        alternative; x after a step with the alternative curvature; the curvature used by
        the first; the alternative curvature)."""
        if self.fast:
            (So, Sa), (g,) = _block_sums(self.design, self.coef, (h_obs, h_alt), (grad,))
            g = g - np.einsum("bkl,wbl->wbk", self.L, x - self.m)
            So = So + self.L
            Sa = Sa + self.L
            if So.shape[-1] == 2:
                a, b, d = So[..., 0, 0], So[..., 0, 1], So[..., 1, 1]
                pd = (a > 0) & (a * d - b * b > 0)
            else:
                pd = np.all(np.linalg.eigvalsh(So) > 0, axis=-1)
            S = np.where(pd[..., None, None], So, Sa)
            dn, _, _ = _solve_small(S, g)
            da, _, _ = _solve_small(Sa, g)
            return x + dn, x + da, S, Sa
        zero = np.zeros_like(grad)
        So, _, _ = self.design.normal_equations(self.coef, h_obs, zero)
        Sa, _, _ = self.design.normal_equations(self.coef, h_alt, zero)
        _, g, _ = self.design.normal_equations(self.coef, np.ones_like(grad), grad)
        g = g - (x - self.m) @ self.L.T
        So = So + self.L
        Sa = Sa + self.L
        pd = np.all(np.linalg.eigvalsh(So) > 0, axis=-1)
        S = np.where(pd[:, None, None], So, Sa)
        dn, _, _ = _solve(S, g)
        da, _, _ = _solve(Sa, g)
        return x + dn, x + da, S, Sa

    def fit(self, ll, x, S) -> LinearFit:
        if self.fast:
            return LinearFit(ll, self.beta(x), self.design, blocks=S)
        return LinearFit(ll, x, self.design, precision=S)
