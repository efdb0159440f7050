"""Sampler overhead of tumble.inference relative to the bare log-likelihood cost.

The log-likelihood is a stand-in of the physical light-curve model's cost: a
1000-point, third-order Fourier light curve (two trigonometric evaluations
per point and walker plus the harmonic recurrences: tens of microseconds per
walker-evaluation, about what the physical model will cost) with a Gaussian likelihood, 8 parameters.

For each ensemble size the script measures, side by side and alternating
(minimum over repeats):

- ``bare``: the log-likelihood alone, called exactly as emcee calls it (two
  half-ensembles per step) on the same number of walker-evaluations;
- ``emcee``: ``emcee.EnsembleSampler`` (vectorised) with the bare function;
- ``sampler``: ``tumble.inference.sample_posterior`` for the same number of
  steps (our log-posterior wrapper, priors, checkpoint-free run, convergence
  assessment at the end of the block).

and prints the overhead ``(t / t_bare - 1)`` of the last two. Target for
``sampler``: at most 25 %.

Times are CPU times of this process (``time.process_time``), the minimum over
interleaved repeats, so that other jobs on a shared machine disturb the
ratios as little as possible; the wall time of a real run is longer when the
machine is busy.

Run: ``OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_inference.py``
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import time  # noqa: E402
import warnings  # noqa: E402

import emcee  # noqa: E402
import numpy as np  # noqa: E402

from tumble.inference import Normal, Parameter, ParameterSpace, PeriodicUniform, Uniform, sample_posterior  # noqa: E402

N_POINTS = 1000
N_STEPS = 1000  # one block of sample_posterior, so its end-of-block assessment is amortised as in use
REPEATS = 3


class FourierLikelihood:
    """Gaussian log-likelihood of a third-order Fourier series at 1000 epochs (picklable)."""

    def __init__(self, seed=0):
        g = np.random.default_rng(seed)
        self.t = np.sort(g.uniform(0.0, 5.0, N_POINTS))  # days
        self.sigma = 0.02
        truth = np.array([2 * np.pi / 0.3, 0.1, 0.2, -0.05, 0.03, 0.1, 0.02, -0.01])
        self.truth = truth
        self.y = self.model(truth[None, :])[0] + self.sigma * g.standard_normal(N_POINTS)

    def model(self, x):
        omega, c = x[:, 0:1], x[:, 1:2]
        ph = omega * self.t[None, :]
        c1, s1 = np.cos(ph), np.sin(ph)
        c2, s2 = c1 * c1 - s1 * s1, 2 * s1 * c1  # harmonics by the angle-addition recurrence
        c3, s3 = c2 * c1 - s2 * s1, s2 * c1 + c2 * s1
        return c + x[:, 2:3] * c1 + x[:, 3:4] * c2 + x[:, 4:5] * c3 + x[:, 5:6] * s1 + x[:, 6:7] * s2 + x[:, 7:8] * s3

    def __call__(self, x):
        r = (self.y - self.model(x)) / self.sigma
        return -0.5 * np.einsum("kn,kn->k", r, r)


def make_space(truth):
    return ParameterSpace(
        [Parameter("omega_rad_per_d", Uniform(truth[0] * 0.99, truth[0] * 1.01), "rad/d"),
         Parameter("offset_mag", Normal(0.0, 1.0), "mag")]
        + [Parameter(f"coef{i}_mag", Uniform(-1.0, 1.0), "mag") for i in range(6)]
    )


def time_bare(ll, positions, n_steps):
    half = positions.shape[0] // 2
    a, b = positions[:half], positions[half:]
    t0 = time.process_time()
    for _ in range(n_steps):
        ll(a)
        ll(b)
    return time.process_time() - t0


def time_emcee(ll, positions, n_steps, seed):
    k, d = positions.shape
    s = emcee.EnsembleSampler(k, d, ll, vectorize=True)
    state = emcee.State(positions, random_state=np.random.RandomState(seed).get_state())
    t0 = time.process_time()
    s.run_mcmc(state, n_steps)
    return time.process_time() - t0


def time_sampler(ll, space, centre, n_walkers, n_steps, seed):
    t0 = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        post = sample_posterior(ll, space, start=centre, n_walkers=n_walkers, n_ensembles=1, max_steps=n_steps,
                                first_block=n_steps, start_scale=1e-6, rng=seed)
    return time.process_time() - t0, post


def main():
    ll = FourierLikelihood()
    space = make_space(ll.truth)
    print(f"log-likelihood: {N_POINTS}-point 3rd-order Fourier series, {space.ndim} parameters; {N_STEPS} steps")
    print(f"{'walkers':>7} {'us/walker-eval':>15} {'bare s':>8} {'emcee s':>8} {'sampler s':>9} "
          f"{'emcee ovh':>9} {'sampler ovh':>11}")
    for n_walkers in (32, 64):
        g = np.random.default_rng(1)
        positions = ll.truth + 1e-6 * np.abs(ll.truth) * g.standard_normal((n_walkers, space.ndim))
        bare, emc, smp = [], [], []
        for rep in range(REPEATS):  # alternate the three measurements
            bare.append(time_bare(ll, positions, N_STEPS))
            emc.append(time_emcee(ll, positions, N_STEPS, rep))
            t, _ = time_sampler(ll, space, ll.truth, n_walkers, N_STEPS, rep)
            smp.append(t)
        tb, te, ts = np.min(bare), np.min(emc), np.min(smp)
        per_eval = tb / (N_STEPS * n_walkers) * 1e6
        print(f"{n_walkers:>7} {per_eval:>15.1f} {tb:>8.2f} {te:>8.2f} {ts:>9.2f} "
              f"{te / tb - 1:>9.1%} {ts / tb - 1:>11.1%}")


if __name__ == "__main__":
    main()
