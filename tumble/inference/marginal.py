"""The physical model's likelihood with the jitter integrated out (one parameter fewer to sample).

The jitter ``s = ln(jitter/mag)`` of :class:`tumble.model.PhysicalModel` enters the likelihood only
through the variances ``err^2 + e^(2 s)``; given the shape magnitudes of a state (the costly part: the
rotation and the scattering law) the likelihood at any jitter is a few matrix products. So
:class:`JitterMarginalLikelihood` integrates it against its flat prior on the support
``[s_lo, s_hi]`` by the trapezoidal rule on a uniform grid of :data:`JITTER_NODES` nodes, for all
walkers at once, and the sampler sees a posterior of one dimension fewer, without the jitter's
non-Gaussian shape (a plateau against the lower bound when the model fits to the noise, a narrow
peak when a model error dominates).

Accuracy: the integrand is smooth and Gaussian-like about its peak in ``s``, whose width is at least
``1 / sqrt(2 n)`` (all ``n`` points dominated by the jitter); for a Gaussian the trapezoidal rule with
step ``h`` errs by about ``2 exp(-2 pi^2 sigma^2 / h^2)`` (relative; e.g. Trefethen & Weideman 2014,
SIAM Review 56, 385, section 5), i.e. below ``1e-3`` for ``h <= 1.6 sigma``: 128 nodes over the
default support (8.5 in ``s``) keep that for up to 300 points (the thinned light curve of the
physical fit). :meth:`JitterMarginalLikelihood.node_log_likelihood_reference` evaluates the same
nodes through the model itself (the slow reference).

The posterior of the jitter is recovered afterwards by drawing it, for each sample, from its
conditional on the grid (:meth:`JitterMarginalLikelihood.draw_jitter`).
"""

from __future__ import annotations

import math

import numpy as np
from tumble.exceptions import TumbleError

__all__ = ["JITTER_NODES", "JITTER_PARAMETER", "JitterMarginalLikelihood"]

#: trapezoid nodes over the jitter's prior support (step 8.5/127 = 0.067 in ln jitter, at most 1.6 times
#: the narrowest peak width 1/sqrt(2 x 300); see the module notes)
JITTER_NODES = 128
#: the model parameter integrated out
JITTER_PARAMETER = "ln_jitter_mag"
#: walkers per block of the node computation (bounds the (K, G, n) work array to ~40 MB)
BLOCK_ELEMENTS = 5_000_000
#: posterior samples per block of the jitter draws (the model's work arrays for 1000 states of 300
#: points are ~20 MB; all ~40 000 samples at once peaked at 500-700 MB)
DRAW_BLOCK_ROWS = 1000


class JitterMarginalLikelihood:
    """``ln int L(x, s) p(s) ds`` of a Gaussian :class:`~tumble.model.PhysicalModel` over its jitter; picklable.

    Called with ``(K, ndim)`` vectors of the model's space (the jitter column is ignored), returns
    ``(K,)`` log-likelihoods marginal over the jitter's flat prior (``-inf`` for invalid states), the
    same zero-point marginalisation as the model's own likelihood.

    Parameters
    ----------
    model : tumble.model.PhysicalModel
        Gaussian likelihood (``student_t`` False).
    n_nodes : int
        Trapezoid nodes over the jitter's prior support.
    """

    def __init__(self, model, n_nodes: int = JITTER_NODES):
        if getattr(model, "student_t", False):
            raise TumbleError("the jitter is integrated out only for the Gaussian likelihood")
        self.model = model
        self.space = model.space
        self.k_jitter = self.space.index(JITTER_PARAMETER)
        prior = self.space.parameters[self.k_jitter].prior
        lo, hi = float(prior.low), float(prior.high)
        self.nodes = np.linspace(lo, hi, int(n_nodes))
        h = self.nodes[1] - self.nodes[0]
        w = np.full(len(self.nodes), h)
        w[0] = w[-1] = 0.5 * h
        # trapezoid weights times the flat prior density 1/(hi - lo)
        self.log_weights = np.log(w / (hi - lo))
        err2 = np.asarray(model.err, float) ** 2
        self.var = err2[None, :] + np.exp(2.0 * self.nodes)[:, None]  # (G, n)
        self.w = 1.0 / self.var
        z = np.asarray(model.z, float)
        self.z = z
        a = np.einsum("gn,nq,np->gqp", self.w, z, z)  # (G, q, q), the same for every walker
        sign, logdet = np.linalg.slogdet(a)
        if np.any(sign <= 0):
            raise TumbleError("the zero-point design is singular")
        self.a_inv = np.linalg.inv(a)
        # every point in exactly one zero-point column (dense sessions): the normal matrix is diagonal
        # and the projections are one matrix product per session
        self.sessions = None
        if np.all((z == 0.0) | (z == 1.0)) and np.all(z.sum(axis=1) == 1.0):
            self.sessions = [np.flatnonzero(z[:, j]) for j in range(z.shape[1])]
            self.a_diag_inv = 1.0 / np.einsum("gqq->gq", a)  # (G, q)
        q = z.shape[1]
        # the parts of the log-likelihood that do not depend on the state, per node
        self.const = (-0.5 * np.sum(np.log(2 * np.pi * self.var), axis=1) - 0.5 * logdet + 0.5 * q * math.log(2 * math.pi))

    def node_log_likelihood(self, x) -> np.ndarray:
        """Conditional log-likelihoods at every jitter node, shape ``(K, G)`` (fast kernel; ``-inf`` rows invalid)."""
        x = np.atleast_2d(np.asarray(x, float))
        out = np.full((len(x), len(self.nodes)), -np.inf)
        ok = self.model.inertia_admissible(x)
        if not ok.any():
            return out
        try:
            # row by row: a state the closed form refuses gives -inf on its own row only, so that a
            # shared call of several ensembles (tumble.inference.local._run) is the sum of its parts
            m = self.model.shape_magnitudes(x[ok], invalid="nan")
        except TumbleError:
            return out
        r = self.model.y[None, :] - m  # (K, n)
        good = np.all(np.isfinite(r), axis=1)
        vals = np.full((len(r), len(self.nodes)), -np.inf)
        if good.any():
            vals[good] = self._from_residuals(r[good])
        out[ok] = vals
        return out

    def _from_residuals(self, r):
        """``(K, G)`` log-likelihoods of raw residuals ``y - m`` (zero-points profiled per node)."""
        k, n = r.shape
        g = len(self.nodes)
        rr = (r * r) @ self.w.T  # (K, G)
        out = np.empty((k, g))
        if self.sessions is not None:
            quad = np.zeros((k, g))
            for j, idx in enumerate(self.sessions):
                rhs = r[:, idx] @ self.w[:, idx].T  # (K, G)
                quad += rhs * rhs * self.a_diag_inv[None, :, j]
            return -0.5 * (rr - quad) + self.const[None]
        step = max(1, BLOCK_ELEMENTS // max(1, g * n))
        for i in range(0, k, step):
            rb = r[i:i + step]
            rhs = (rb[:, None, :] * self.w[None]) @ self.z  # (k, G, q)
            quad = np.einsum("kgq,gqp,kgp->kg", rhs, self.a_inv, rhs)
            out[i:i + step] = -0.5 * (rr[i:i + step] - quad) + self.const[None]
        return out

    def node_log_likelihood_reference(self, x) -> np.ndarray:
        """Slow reference of :meth:`node_log_likelihood`: the model's own likelihood at each node."""
        x = np.atleast_2d(np.asarray(x, float))
        out = np.empty((len(x), len(self.nodes)))
        for j, s in enumerate(self.nodes):
            xs = x.copy()
            xs[:, self.k_jitter] = s
            out[:, j] = self.model(xs)
        return out

    def __call__(self, x) -> np.ndarray:
        lw = self.node_log_likelihood(x) + self.log_weights[None]
        top = np.max(lw, axis=1)
        out = np.full(len(lw), -np.inf)
        ok = np.isfinite(top)
        if ok.any():  # log-sum-exp about each row's largest term
            out[ok] = top[ok] + np.log(np.sum(np.exp(lw[ok] - top[ok, None]), axis=1))
        return out

    def draw_jitter(self, x, rng) -> tuple:
        """The jitter of each state drawn from its conditional posterior, and the log-likelihood there.

        A node is drawn with probability proportional to its trapezoid weight times its likelihood,
        then a uniform offset within half a grid step (clipped to the support); the returned
        log-likelihood is the model's at the drawn jitter (zero-points marginalised, as the model's
        own). Returns ``(s (K,), log_likelihood (K,))``.
        """
        x = np.atleast_2d(np.asarray(x, float))
        rng = np.random.default_rng(rng)
        s_out = np.full(len(x), np.nan)
        ll_out = np.full(len(x), -np.inf)
        ok = np.flatnonzero(self.model.inertia_admissible(x))
        for i in range(0, len(ok), DRAW_BLOCK_ROWS):  # blocks: the model's work arrays grow with the rows
            idx = ok[i:i + DRAW_BLOCK_ROWS]
            r = self.model.y[None, :] - self.model.shape_magnitudes(x[idx])
            s_out[idx], ll_out[idx] = self._draw_from_residuals(r, rng)
        return s_out, np.where(np.isfinite(ll_out), ll_out, -np.inf)

    def _draw_from_residuals(self, r, rng):
        ll = self._from_residuals(r)
        lw = ll + self.log_weights[None]
        with np.errstate(invalid="ignore"):
            p = np.exp(lw - np.max(lw, axis=1, keepdims=True))
        p = np.where(np.isfinite(p), p, 0.0)
        cdf = np.cumsum(p, axis=1)
        u = rng.uniform(size=len(r)) * cdf[:, -1]
        idx = np.minimum(np.sum(cdf < u[:, None], axis=1), len(self.nodes) - 1)
        h = self.nodes[1] - self.nodes[0]
        s = np.clip(self.nodes[idx] + h * (rng.uniform(size=len(r)) - 0.5), self.nodes[0], self.nodes[-1])
        return s, self._at_jitter(r, s)

    def _at_jitter(self, r, s):
        """Log-likelihoods of raw residuals ``(K, n)`` at one jitter per row ``s (K,)`` (zero-points profiled)."""
        var = np.asarray(self.model.err, float)[None, :] ** 2 + np.exp(2.0 * s)[:, None]
        w = 1.0 / var
        a = np.einsum("kn,nq,np->kqp", w, self.z, self.z)
        rhs = (w * r) @ self.z
        coef = np.linalg.solve(a, rhs[..., None])[..., 0]
        _, logdet = np.linalg.slogdet(a)
        chi2 = np.sum(w * r * r, axis=1) - np.sum(coef * rhs, axis=1)
        q = self.z.shape[1]
        return -0.5 * chi2 - 0.5 * np.sum(np.log(2 * np.pi * var), axis=1) - 0.5 * logdet + 0.5 * q * math.log(2 * math.pi)
