"""Robust nonlinear least squares for a handful of parameters: Levenberg-Marquardt on the soft-L1 loss.

Minimises ``C(p) = 1/2 f^2 sum_i rho((r_i(p) / f)^2)`` with the soft-L1 loss
``rho(z) = 2 (sqrt(1 + z) - 1)`` (quadratic for small residuals, linear for large ones), the cost the
mistilt fit (:mod:`saed.index.mistilt`) uses. Each iteration takes the weights
``w_i = rho'(z_i) = (1 + z_i)^(-1/2)`` at the current point (iteratively reweighted least squares:
the weighted problem has the same gradient as C, so a fixed point is a stationary point of C) and a
Levenberg-Marquardt step on the weighted residuals, the damping scaled per parameter by ``x_scale``
and adapted by Marquardt's rule (a step is kept only when it lowers C).

Written here rather than called from ``scipy.optimize`` because importing that package costs about
0.24 s of CPU in every cold ``saed index`` (issue 15 item 13: start-up), for one 4-parameter fit.
The tests hold it to ``scipy.optimize.least_squares(..., loss="soft_l1")`` as the reference.

References: K. Levenberg, Q. Appl. Math. 2, 164 (1944); D. W. Marquardt, J. SIAM 11, 431 (1963);
P. J. Huber, *Robust Statistics* (1981), ch. 7 (iteratively reweighted least squares).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

__all__ = ["soft_l1_cost", "robust_least_squares"]


def soft_l1_cost(r: np.ndarray, f_scale: float) -> float:
    """``1/2 f^2 sum 2 (sqrt(1 + (r/f)^2) - 1)``: the cost being minimised."""
    z = (np.asarray(r, float) / f_scale) ** 2
    return float(0.5 * f_scale**2 * np.sum(2.0 * (np.sqrt(1.0 + z) - 1.0)))


def _jacobian(fun: Callable[[np.ndarray], np.ndarray], p: np.ndarray, r0: np.ndarray, step: np.ndarray) -> np.ndarray:
    jac = np.empty((len(r0), len(p)))
    for k in range(len(p)):
        dp = np.zeros(len(p))
        dp[k] = step[k]
        jac[:, k] = (fun(p + dp) - fun(p - dp)) / (2.0 * step[k])
    return jac


def robust_least_squares(fun: Callable[[np.ndarray], np.ndarray], p0, *, f_scale: float = 1.0, x_scale=1.0,
                         max_iter: int = 60, xtol: float = 1e-8, ftol: float = 1e-8) -> np.ndarray:
    """Parameters minimising the soft-L1 cost of the residuals ``fun(p)``, started at `p0`.

    `x_scale`: the typical size of each parameter (the damping and the finite-difference steps
    follow it). Stops when a step changes the cost by less than `ftol` relative, or the parameters by
    less than `xtol` relative to `x_scale`, or after `max_iter` iterations; returns the best point
    seen (at worst `p0`).

    >>> import numpy as np
    >>> x = np.linspace(0.0, 1.0, 9)
    >>> y = 2.0 * x + 1.0
    >>> y[4] += 50.0  # one wild point: plain least squares would put the intercept at 6.6
    >>> p = robust_least_squares(lambda p: p[0] * x + p[1] - y, [0.0, 0.0], f_scale=0.1)
    >>> np.round(p, 1).tolist()
    [2.0, 1.0]
    """
    p = np.asarray(p0, float).copy()
    scale = np.broadcast_to(np.asarray(x_scale, float), p.shape).copy()
    step = 1e-6 * np.maximum(scale, np.abs(p))
    r = np.asarray(fun(p), float)
    cost = soft_l1_cost(r, f_scale)
    if not np.isfinite(cost):
        return p
    lam = 1e-3
    damping = 1.0 / scale**2
    for _ in range(max_iter):
        w = 1.0 / np.sqrt(1.0 + (r / f_scale) ** 2)
        jac = _jacobian(fun, p, r, step)
        jw = jac * w[:, None]
        grad = jw.T @ r
        hess = jac.T @ jw
        improved = False
        for _ in range(12):  # raise the damping until a step lowers the cost
            try:
                delta = np.linalg.solve(hess + lam * np.diag(np.diag(hess) + damping), -grad)
            except np.linalg.LinAlgError:
                lam *= 10.0
                continue
            trial = p + delta
            r_trial = np.asarray(fun(trial), float)
            c_trial = soft_l1_cost(r_trial, f_scale)
            if np.isfinite(c_trial) and c_trial < cost:
                improved = True
                break
            lam *= 10.0
        if not improved:
            break
        small_step = np.all(np.abs(delta) <= xtol * (scale + np.abs(p)))
        small_drop = cost - c_trial <= ftol * cost
        p, r, cost = trial, r_trial, c_trial
        lam = max(lam / 10.0, 1e-12)
        if small_step or small_drop:
            break
    return p
