"""Posterior sampling after a fit (emcee), with the scale and baseline integrated out."""

from __future__ import annotations

import warnings as _warnings

import numpy as np

from ..progress import emit
from .data import FitError
from .problem import FitProblem
from .result import PosteriorSummary

__all__ = ["sample_posterior", "DEFAULT_STEPS", "MIN_AUTOCORRELATION_TIMES", "EXTENSION_FACTOR"]

#: default length of a posterior chain (steps per walker)
DEFAULT_STEPS = 2000
#: a chain is long enough when its kept part spans this many autocorrelation times (emcee's advice)
MIN_AUTOCORRELATION_TIMES = 50
#: a chain that is too short after ``steps`` is extended, up to this many times ``steps`` in all (default)
EXTENSION_FACTOR = 5


def sample_posterior(problem: FitProblem, x, free, cov, walkers, steps, burn, seed, progress,
                     max_steps: int | None = None) -> PosteriorSummary:
    """Sample the posterior of the free parameters with emcee, from a small ball about the solution.

    Uniform priors inside the bounds; the log-likelihood is
    ``-chi^2/2 - log det(A_w^T A_w)/2``: a Gaussian likelihood with the noise
    level, the scale and baseline integrated out analytically (flat priors on
    them).  Weights are reported normalised to sum 1, as the least-squares
    values are.

    Parameters
    ----------
    problem : FitProblem
    x : numpy.ndarray
        The least-squares solution.
    free : sequence of FreeParameter
    cov : numpy.ndarray
        Covariance of the free parameters (sets the size of the starting ball).
    walkers, steps, burn : int or None
        Walkers (default ``max(16, 4 p)``, even), steps per walker and
        discarded steps (default a quarter of ``steps``).
    max_steps : int, optional
        When the kept chain is shorter than :data:`MIN_AUTOCORRELATION_TIMES`
        integrated autocorrelation times after ``steps``, sampling goes on
        (in blocks sized from the estimated time) up to ``max_steps`` in all
        (default ``EXTENSION_FACTOR * steps``); the summary says whether the
        chain was long enough in the end.
    seed : int
    progress : callable or None
        Subscriber of the progress protocol (stage ``"posterior"``).

    Returns
    -------
    PosteriorSummary

    References
    ----------
    D. Foreman-Mackey, D. W. Hogg, D. Lang, J. Goodman, Publ. Astron. Soc. Pac.
    125 (2013) 306 (emcee); J. Goodman, J. Weare, Commun. Appl. Math. Comput.
    Sci. 5 (2010) 65 (affine-invariant ensemble sampling).
    """
    import emcee

    p = x.size
    nw = int(walkers) if walkers is not None else max(16, 4 * p)
    nw += nw % 2
    if nw < 2 * p:
        raise FitError(f"walkers = {nw} must be at least twice the number of free parameters ({p})")
    steps = int(steps)
    burn = steps // 4 if burn is None else int(burn)
    if steps < 10 or not (0 <= burn < steps):
        raise FitError(f"posterior: steps = {steps} must be at least 10 and burn = {burn} in [0, steps)")
    lo, hi = problem.lo, problem.hi

    interrupted = []

    def log_prob(theta):
        if interrupted or np.any(theta < lo) or np.any(theta > hi):
            return -np.inf
        try:
            ev = problem.evaluate(theta)
        except KeyboardInterrupt:  # raised again outside the sampler, which would print a traceback
            interrupted.append(True)
            return -np.inf
        return -0.5 * float(ev.residual @ ev.residual) - 0.5 * ev.logdet

    rng = np.random.default_rng(seed)
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
    sd = np.where(np.isfinite(sd) & (sd > 0), sd, 1e-3 * span)
    p0 = x + 0.1 * sd * rng.standard_normal((nw, p))
    p0 = np.clip(p0, lo + 1e-9 * span, hi - 1e-9 * span)
    sampler = emcee.EnsembleSampler(nw, p, log_prob)
    sampler.random_state = np.random.RandomState(seed).get_state()
    limit = max(steps, int(max_steps) if max_steps is not None else EXTENSION_FACTOR * steps)

    def run(start, n, total):
        done = sampler.iteration
        state = start
        for i, state in enumerate(sampler.sample(start, iterations=n)):
            if interrupted:
                raise KeyboardInterrupt
            emit(progress, "posterior", done + i + 1, total, unit="steps")
        return state

    def autocorr():
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            import logging

            logger = logging.getLogger("emcee.autocorr")
            level = logger.level
            logger.setLevel(logging.ERROR)
            try:
                return sampler.get_autocorr_time(discard=burn, quiet=True)
            finally:
                logger.setLevel(level)

    state = run(p0, steps, steps)
    tau = autocorr()
    while sampler.iteration < limit:
        t_max = float(np.max(np.where(np.isfinite(tau), tau, sampler.iteration)))
        need = int(np.ceil(1.1 * MIN_AUTOCORRELATION_TIMES * t_max)) + burn
        if sampler.iteration >= need:
            break
        n = int(min(limit - sampler.iteration, max(need - sampler.iteration, steps // 4, 10)))
        state = run(state, n, min(limit, need))
        tau = autocorr()
    steps = sampler.iteration
    chain = sampler.get_chain(discard=burn, flat=True)
    tau = np.where(np.isfinite(tau), tau, float(steps))
    # report weights normalised, like the least-squares values
    weight_idx = [k for k, fp in enumerate(free) if fp.address.table == "site" and fp.address.key == "weight"]
    if weight_idx:
        rep = chain.copy()
        for r in range(chain.shape[0]):
            w = np.array([s.weight for s in problem.model_at(chain[r]).sites])
            for k in weight_idx:
                rep[r, k] = w[free[k].address.index] / w.sum()
        chain = rep
    med = np.median(chain, axis=0)
    q16, q84 = np.percentile(chain, [16.0, 84.0], axis=0)
    return PosteriorSummary(tuple(fp.name for fp in free), tuple(map(float, med)), tuple(map(float, q16)),
                            tuple(map(float, q84)), chain, nw, steps, burn, tuple(map(float, tau)),
                            bool(steps - burn >= MIN_AUTOCORRELATION_TIMES * float(np.max(tau))),
                            float(np.mean(sampler.acceptance_fraction)))


def posterior_messages(post: PosteriorSummary, steps: int) -> tuple[list, list]:
    """What a fit says of its posterior sample: a chain too short (a warning) or extended (a note).

    Parameters
    ----------
    post : PosteriorSummary
    steps : int
        The steps asked for.

    Returns
    -------
    (list of str, list of str)
        Warnings and notes.
    """
    if not post.converged:
        return [f"the posterior chain is too short even after extending it to {post.steps} steps: "
                f"{post.steps - post.burn} kept steps per walker are fewer than {MIN_AUTOCORRELATION_TIMES} "
                f"integrated autocorrelation times (longest {max(post.autocorrelation_steps):.3g} steps); "
                "the posterior intervals are not reliable: raise max_steps (--max-steps)"], []
    if post.steps > int(steps):
        return [], [f"the posterior chain was extended from {int(steps)} to {post.steps} steps to span "
                    f"{MIN_AUTOCORRELATION_TIMES} autocorrelation times"]
    return [], []
