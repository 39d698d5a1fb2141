"""Benchmark section ``likelihood``: the demo posterior with each exported evaluator, old-style and generated."""

from __future__ import annotations

import itertools

import numpy as np

from ..._bench import timeit_median

__all__ = ["bench_likelihood"]


def bench_likelihood(quick: bool = False, echo=print) -> None:
    """One theta and a batch of walkers through the demo posterior, with each committed evaluator in both styles.

    BLAS runs on one thread (as the demo samples).  The evaluators are those
    of the ``export`` section (``tovforge.export._bench``): a generated file
    is also timed through its general runtime (old-style).
    """
    import tempfile
    from pathlib import Path

    from threadpoolctl import threadpool_limits

    from ...export._bench import _demo_pairs, _side_by_side, _styled
    from ._likelihood import Posterior
    from ._observations import load_observations

    obs = load_observations()
    reps, rounds = (30, 2) if quick else (200, 3)
    with threadpool_limits(limits=1), tempfile.TemporaryDirectory() as tmp:
        pairs = _demo_pairs(Path(tmp), echo)
        echo(f"the demo posterior (invented observations: {len(obs.pulsars)} pulsars, {len(obs.mergers)} merger; "
             "65 mass nodes per pulsar, 33 mass ratios per merger): median of "
             f"{reps} calls, best of {rounds} interleaved rounds")
        echo(f"    {'evaluator':<44}{'old-style':>12}{'generated':>12}{'ratio':>8}{'evaluator calls':>18}")
        for pair in pairs:
            if pair.new is None:
                echo(f"    {pair.label}: no generated evaluator (no trained model); skipped")
                continue
            rng = np.random.default_rng(7)
            b = np.asarray(pair.new.BOUNDS, float)
            walkers = b[:, 0] + (b[:, 1] - b[:, 0]) * (0.3 + 0.4 * rng.random((32, len(b))))
            one = walkers[:1]
            # one theta: a new walker at every call (evaluators keep the latest theta's kernel rows, which
            # serve the several queries of one call but must not serve the next call)
            rows = itertools.cycle([walkers[i:i + 1] for i in range(len(walkers))])
            for label, theta in (("one theta", None), ("32 walkers, per theta", walkers)):
                posts = [Posterior(m, obs) if m is not None else None for m in (pair.old, pair.new)]
                calls = [_styled(m, i == 0 and pair.old is pair.new)(
                    lambda mm, p=p, t=theta: p(next(rows) if t is None else t))
                    if p is not None else None for i, (m, p) in enumerate(zip((pair.old, pair.new), posts))]
                theta_rows = one if theta is None else theta
                t_old, t_new = _side_by_side(calls[0], calls[1], reps if theta is None else max(3, reps // 10),
                                             rounds)
                theta = theta_rows
                t_eval = _evaluator_seconds(pair.new, posts[1], theta, reps)
                n = len(theta)
                echo(f"    {pair.label.split(' ')[0] + ', ' + label:<44}{t_old / n * 1e6:>9.0f} us{t_new / n * 1e6:>9.0f} us"
                     f"{t_old / t_new:>7.2f}x{t_eval / n * 1e6:>15.0f} us")
    echo("evaluator calls: the generated evaluator's own queries for these theta (M_max, R at the pulsar masses, "
         "Lambda at the merger masses); the rest is the likelihood's arithmetic.")
    echo("floor (goal) of the demo likelihood, one theta: 0.5 (0.15) ms.")


def _evaluator_seconds(model, post, theta, reps: int) -> float:
    """Seconds of the three evaluator queries one posterior call makes at ``theta`` (as in the posterior: the
    first query at a new theta, the next ones at the same theta; two theta alternate)."""
    other = theta + 1e-9 * (np.asarray(model.BOUNDS, float)[:, 1] - np.asarray(model.BOUNDS, float)[:, 0])
    work = []
    for t in (theta, other):
        mmax = model.mass_max(t).value
        pairs = post.merger_pairs(mmax)
        work.append((t, post.pulsar_masses(mmax), np.concatenate([m for m1, m2, _ in pairs for m in (m1, m2)], axis=1)))

    def calls():
        for t, masses, pair_masses in work:
            model.mass_max(t)
            model.radius(t, masses)
            model.tidal_deformability(t, pair_masses)

    return timeit_median(calls, reps) / 2.0
