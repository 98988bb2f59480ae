"""The ensemble sampler: emcee's affine-invariant ensemble run to a stated convergence rule.

:func:`run_ensembles` wraps :class:`emcee.EnsembleSampler` (``vectorize=True``: the log
density gets all proposed positions at once, an (n, ndim) array, and returns (n,)):

* the walkers (default 4 ndim, at least 8, always >= 2 ndim as the stretch move needs)
  start in a small ball around a given optimum, drawn from *our* Generator;
* each ensemble's legacy ``RandomState`` is seeded from that Generator and the seeding is
  checked (emcee ignores a state it cannot use without saying so);
* the ensembles advance in blocks of ``check_interval`` steps; after each block the
  integrated autocorrelation time tau of every parameter is estimated (on the whole chain),
  and sampling stops when the chain is longer than ``tol`` (50) times the largest tau of
  any parameter and ensemble and that largest tau changed by less than ``rtol`` (1 %)
  since the previous block, and the part kept after the burn-in is itself longer than
  ``headroom`` (1.1) x ``tol`` times its own largest tau estimate;
* the first ``discard_taus`` (5) times the largest tau are discarded as burn-in and the rest
  thinned by half the smallest tau;
* at ``max_steps`` without meeting the rule a :class:`~uqreport.errors.ConvergenceWarning`
  is issued and the run is marked ``converged=False`` (never a silent unconverged answer).

Several ensembles (``chains``) run in lockstep with independent seeds, so that a split R-hat
across ensembles can be computed (R-hat across the walkers of one ensemble is not valid:
they are not independent chains).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import emcee
import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from .._numeric import RandomLike, as_generator
from ..errors import ConvergenceWarning, InputError, ModelError
from .diagnostics import integrated_time

__all__ = [
    "EnsembleRun",
    "LogDensity",
    "default_walkers",
    "maximise",
    "run_ensembles",
    "seed_sampler",
]

LogDensity = Callable[[NDArray[np.float64]], NDArray[np.float64]]

#: Moves of the ensemble: emcee's default stretch move, or a differential-evolution mix.
MOVES = ("stretch", "de-mix")


def default_walkers(ndim: int) -> int:
    """4 ndim walkers, at least 8, rounded up to an even number."""
    n = max(4 * int(ndim), 8)
    return n + (n % 2)


def seed_sampler(sampler: emcee.EnsembleSampler, rng: np.random.Generator) -> int:
    """Seed ``sampler``'s legacy RandomState from ``rng`` and check that it took.

    Returns the integer seed.  emcee's ``random_state`` setter swallows any error, so the
    state is read back and compared; a mismatch raises :class:`~uqreport.errors.ModelError`.
    """
    seed = int(rng.integers(0, 2**32 - 1))
    wanted = np.random.RandomState(seed).get_state()
    sampler.random_state = wanted
    got = sampler.random_state
    if not (np.array_equal(got[1], wanted[1]) and got[2] == wanted[2]):
        raise ModelError(
            "emcee did not accept the seeded random state (its setter fails silently);"
            " the run would not be reproducible. Check the installed emcee version."
        )
    return seed


def maximise(
    log_density: LogDensity,
    start: NDArray[np.float64],
    scale: NDArray[np.float64],
    *,
    max_iterations: int = 500,
) -> tuple[NDArray[np.float64], float]:
    """Maximise a vectorised log density from ``start`` (L-BFGS in units of ``scale``, with
    central differences evaluated in one vectorised call of 2 ndim + 1 rows).

    Returns the optimum and the log density there.  A non-finite start is returned as is.
    """
    x0 = np.asarray(start, dtype=float)
    sc = np.asarray(scale, dtype=float)
    d = x0.size
    h = 1e-4
    eye = h * np.eye(d)

    def fun(u: NDArray[np.float64]) -> tuple[float, NDArray[np.float64]]:
        # optimise in units of ``scale`` around the start: well conditioned for L-BFGS
        rows = x0 + np.vstack([u, u + eye, u - eye]) * sc
        f = np.asarray(log_density(rows), dtype=float)
        if not np.isfinite(f[0]):
            return 1e300, np.zeros(d)
        fp, fm = f[1 : d + 1], f[d + 1 :]
        g = np.where(
            np.isfinite(fp) & np.isfinite(fm),
            (fp - fm) / (2.0 * h),
            np.where(
                np.isfinite(fp), (fp - f[0]) / h, np.where(np.isfinite(fm), (f[0] - fm) / h, 0.0)
            ),
        )
        return -float(f[0]), -g

    f0 = float(np.asarray(log_density(x0[None, :]))[0])
    if not np.isfinite(f0):
        return x0, f0
    res = optimize.minimize(
        fun, np.zeros(d), jac=True, method="L-BFGS-B", options={"maxiter": max_iterations}
    )
    x = x0 + np.asarray(res.x, dtype=float) * sc
    fx = float(np.asarray(log_density(x[None, :]))[0])
    if not (np.isfinite(fx) and fx >= f0):
        return x0, f0
    return x, fx


@dataclass(frozen=True)
class EnsembleRun:
    """The outcome of :func:`run_ensembles`.

    Attributes
    ----------
    chain:
        Every position of every ensemble, shape (E, steps, walkers, ndim), burn-in included.
    log_prob:
        The log density at those positions, shape (E, steps, walkers).
    acceptance:
        Acceptance fraction of each walker, shape (E, walkers).
    tau:
        Integrated autocorrelation time of each parameter on the kept part of the chain, in
        steps, the largest over ensembles, shape (ndim,).
    tau_per_ensemble:
        The same per ensemble, shape (E, ndim).
    tau_history:
        (steps, largest tau) after each block: how the estimate settled.
    converged:
        Whether the rule (steps > ``tol`` max tau, max tau changed < ``rtol``) was met.
    steps, discard, thin:
        Steps run per ensemble, burn-in discarded, thinning of the kept draws.
    walkers:
        Walkers per ensemble.
    seeds:
        The integer seed of each ensemble's RandomState (reproducibility record).
    tol, rtol:
        The convergence rule's constants.
    """

    chain: NDArray[np.float64]
    log_prob: NDArray[np.float64]
    acceptance: NDArray[np.float64]
    tau: NDArray[np.float64]
    tau_per_ensemble: NDArray[np.float64]
    tau_history: tuple[tuple[int, float], ...]
    converged: bool
    steps: int
    discard: int
    thin: int
    walkers: int
    seeds: tuple[int, ...]
    tol: float
    rtol: float

    @property
    def ensembles(self) -> int:
        return int(self.chain.shape[0])

    @property
    def ndim(self) -> int:
        return int(self.chain.shape[3])

    def kept(self) -> NDArray[np.float64]:
        """Kept positions, shape (E, kept steps, walkers, ndim) (after discard, thinned)."""
        return self.chain[:, self.discard :: self.thin]

    def kept_log_prob(self) -> NDArray[np.float64]:
        return self.log_prob[:, self.discard :: self.thin]

    def ess(self) -> NDArray[np.float64]:
        """Effective sample size of each parameter, summed over ensembles, shape (ndim,)."""
        n = (self.steps - self.discard) * self.walkers
        return np.sum(n / self.tau_per_ensemble, axis=0)


def _moves(kind: str) -> object:
    if kind == "stretch":
        return None
    if kind == "de-mix":
        # differential evolution with some stretch moves; not emcee 3.1.6's DESnookerMove,
        # which under-disperses (its direction vector is scaled by 1/sqrt|d| instead of 1/|d|:
        # on a 6-D Gaussian it gives about 0.85 of the true standard deviations)
        return [(emcee.moves.DEMove(), 0.8), (emcee.moves.StretchMove(), 0.2)]
    raise InputError(
        f"moves = {kind!r} is unknown. Fix: use one of " + ", ".join(repr(m) for m in MOVES) + "."
    )


def _ball(
    log_density: LogDensity,
    start: NDArray[np.float64],
    scale: NDArray[np.float64],
    walkers: int,
    rng: np.random.Generator,
    ball: float,
) -> NDArray[np.float64] | None:
    """Start positions around ``start``; walkers that land where the density is zero are
    drawn again (up to 50 times).  ``None`` if some never land inside."""
    pos = start + ball * scale * rng.standard_normal((walkers, start.size))
    lp = np.asarray(log_density(pos), dtype=float)
    for _ in range(50):
        bad = ~np.isfinite(lp)
        if not np.any(bad):
            return pos
        nb = int(bad.sum())
        pos[bad] = start + ball * scale * rng.standard_normal((nb, start.size))
        lp[bad] = np.asarray(log_density(pos[bad]), dtype=float)
    return None if np.any(~np.isfinite(lp)) else pos


def run_ensembles(
    log_density: LogDensity,
    start: NDArray[np.float64],
    scale: NDArray[np.float64],
    *,
    rng: RandomLike = None,
    chains: int = 1,
    walkers: int | None = None,
    ball: float = 0.1,
    max_steps: int = 50_000,
    check_interval: int = 100,
    tol: float = 50.0,
    rtol: float = 0.01,
    discard_taus: float = 5.0,
    headroom: float = 1.1,
    moves: str = "stretch",
    progress: bool = False,
    diagnose: Callable[[NDArray[np.float64]], str] | None = None,
) -> EnsembleRun:
    """Sample ``log_density`` with ``chains`` independently seeded ensembles until converged.

    ``start`` (ndim,) is the optimum the walkers start around, ``scale`` (ndim,) a rough
    posterior standard deviation per parameter: the start ball has radius ``ball`` times
    it.  ``diagnose(x)`` may return a message naming the parameter that makes the density
    zero at ``x``; it is used in the :class:`~uqreport.errors.InputError` raised when the
    log density is not finite at the start.  ``headroom`` (1.1) asks the kept part to be
    that much longer than ``tol`` tau: quantities derived from the thinned draws estimate
    their own tau a few per cent less precisely and are judged by the same rule.
    """
    gen = as_generator(rng)
    x0 = np.asarray(start, dtype=float)
    sc = np.asarray(scale, dtype=float)
    ndim = x0.size
    if ndim < 1 or sc.shape != x0.shape:
        raise InputError(
            f"start and scale must be 1-D arrays of one length, got {x0.shape} and {sc.shape}."
        )
    if not np.all(np.isfinite(sc) & (sc > 0)):
        raise InputError(f"scale: every entry must be finite and > 0, got {sc.tolist()}.")
    nw = default_walkers(ndim) if walkers is None else int(walkers)
    if nw < 2 * ndim:
        raise InputError(
            f"walkers = {nw} is below 2 ndim = {2 * ndim}, the fewest the stretch move can use."
            f" Fix: use walkers >= {2 * ndim} (default 4 ndim)."
        )
    if int(chains) < 1:
        raise InputError(f"chains = {chains!r}: at least one ensemble is needed.")
    if int(max_steps) < 2 * check_interval:
        raise InputError(
            f"max_steps = {max_steps} is below two check intervals ({2 * check_interval})."
            " Fix: allow more steps."
        )
    f0 = np.asarray(log_density(x0[None, :]), dtype=float)
    if f0.shape != (1,):
        raise InputError(
            f"the log density must return one value per row, got shape {f0.shape} for 1 row."
        )
    if not np.isfinite(f0[0]):
        detail = diagnose(x0) if diagnose is not None else f"at {x0.tolist()}"
        raise InputError(f"the log-posterior is not finite at the start: {detail}")

    samplers: list[emcee.EnsembleSampler] = []
    states: list[NDArray[np.float64]] = []
    seeds: list[int] = []
    for _ in range(int(chains)):  # loop over ensembles
        pos = _ball(log_density, x0, sc, nw, gen, ball)
        if pos is None:
            detail = diagnose(x0) if diagnose is not None else ""
            raise InputError(
                "the log-posterior is not finite around the start (walkers could not be"
                f" placed in a ball of {ball} posterior sd around it). {detail}".rstrip()
            )
        s = emcee.EnsembleSampler(nw, ndim, log_density, vectorize=True, moves=_moves(moves))
        seeds.append(seed_sampler(s, gen))
        samplers.append(s)
        states.append(pos)

    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=int(max_steps), desc="MCMC", unit="step", leave=False)
    steps = 0
    old = math.inf
    last_change = math.nan
    history: list[tuple[int, float]] = []
    converged = False
    try:
        while steps < max_steps:  # loop over blocks of steps
            n = min(int(check_interval), int(max_steps) - steps)
            for i, s in enumerate(samplers):
                states[i] = s.run_mcmc(states[i], n, progress=False)
            steps += n
            if bar is not None:
                bar.update(n)
            tau = np.max([integrated_time(s.get_chain()) for s in samplers], axis=0)
            t_max = float(np.max(tau))
            history.append((steps, t_max))
            with np.errstate(invalid="ignore"):
                last_change = np.abs(old - t_max) / t_max
            settled = bool(abs(old - t_max) < rtol * t_max)
            # long enough that what is kept after the burn-in (discard_taus tau) is still
            # longer than tol tau, so every kept quantity meets the rule on its own; checked
            # on the kept part's own estimate too (it can exceed the whole chain's)
            if np.all(np.isfinite(tau)) and steps > (tol + discard_taus) * t_max and settled:
                d = min(math.ceil(discard_taus * t_max), steps // 2)
                tau_k = np.max([integrated_time(s.get_chain()[d:]) for s in samplers], axis=0)
                if np.all(np.isfinite(tau_k)) and steps - d > headroom * tol * np.max(tau_k):
                    converged = True
                    break
            old = t_max
    finally:
        if bar is not None:
            bar.close()

    chain = np.stack([s.get_chain() for s in samplers])
    logp = np.stack([s.get_log_prob() for s in samplers])
    acc = np.stack([s.acceptance_fraction for s in samplers])
    tau_full = np.max([integrated_time(c) for c in chain], axis=0)
    tau_max = float(np.nanmax(tau_full)) if np.any(np.isfinite(tau_full)) else float(steps)
    discard = min(math.ceil(discard_taus * tau_max), steps // 2)
    tau_e = np.stack([integrated_time(c[discard:]) for c in chain])
    tau_e = np.where(np.isfinite(tau_e), np.maximum(tau_e, 1.0), float(steps - discard))
    thin = max(1, int(0.5 * float(np.min(tau_e))))
    if not converged:
        change = float(last_change)
        warnings.warn(
            f"MCMC did not converge within max_steps = {max_steps}: the chain is"
            f" {steps} steps long against {tol:g} x the largest autocorrelation time"
            f" ({tau_max:.1f} steps), and the estimate changed by up to {100 * change:.1f} %"
            f" over the last {check_interval} steps (the rule asks for < {100 * rtol:g} %);"
            " the results are marked converged = false. Fix: allow more steps (max_steps)"
            " or simplify the model.",
            ConvergenceWarning,
            stacklevel=2,
        )
    return EnsembleRun(
        chain=chain,
        log_prob=logp,
        acceptance=acc,
        tau=np.max(tau_e, axis=0),
        tau_per_ensemble=tau_e,
        tau_history=tuple(history),
        converged=converged,
        steps=steps,
        discard=discard,
        thin=thin,
        walkers=nw,
        seeds=tuple(seeds),
        tol=float(tol),
        rtol=float(rtol),
    )
