"""The No-U-Turn sampler: one Hamiltonian transition and step-size adaptation.

Pure algorithm, no I/O: :func:`nuts_step` makes one transition of a
log-density given as ``f(z) -> (log p, gradient)`` with a unit mass matrix
(the whitening of :mod:`deepwell.fit.sampling.gradient` plays the role of the
metric), drawing every random number from the Generator passed in.

Transition (multinomial NUTS)
    A trajectory is doubled forwards or backwards in time with the leapfrog
    integrator until its ends make a U-turn, a step diverges (energy error
    above ``MAX_DELTA_H``) or the depth reaches ``max_depth``.  Within a
    sub-tree the new state is drawn with probability proportional to
    exp(-H); across doublings with the biased progressive rule
    min(1, w_new / w_old).  The U-turn test is the generalised one on the
    summed momenta, rho . p_- <= 0 or rho . p_+ <= 0.

Step size
    Dual averaging towards a mean acceptance statistic ``delta`` (0.8).

References
----------
Hoffman, M. D. & Gelman, A. 2014, JMLR 15, 1593 (NUTS, dual averaging:
Algorithms 4-6, gamma = 0.05, t0 = 10, kappa = 0.75); Betancourt, M. 2017,
arXiv:1701.02434 (multinomial sampling, generalised U-turn criterion,
appendix A); both from memory.
"""

from dataclasses import dataclass

import numpy as np

__all__ = ["MAX_DELTA_H", "Transition", "nuts_step", "DualAveraging", "initial_step_size"]

#: Energy error that marks a divergent leapfrog step.
MAX_DELTA_H = 1000.0


@dataclass(frozen=True)
class Transition:
    """Outcome of one NUTS transition.

    Attributes
    ----------
    z, log_prob, grad : new state
    accept_stat : float
        Mean of min(1, exp(H0 - H)) over the trajectory's leapfrog steps.
    n_leapfrog, depth : int
    diverged : bool
    moved : bool
        The new state differs from the old one.
    """

    z: np.ndarray
    log_prob: float
    grad: np.ndarray
    accept_stat: float
    n_leapfrog: int
    depth: int
    diverged: bool
    moved: bool


class _Tree:
    __slots__ = ("zm", "pm", "gm", "lpm", "zp", "pp", "gp", "lpp", "z", "lp", "g", "log_w",
                 "rho", "stop", "diverged", "sum_acc", "n")


def _leapfrog(f, z, p, g, eps):
    p = p + 0.5 * eps * g
    z = z + eps * p
    lp, g = f(z)
    p = p + 0.5 * eps * g
    return z, p, g, lp


def _uturn(rho, pm, pp):
    return float(rho @ pm) <= 0.0 or float(rho @ pp) <= 0.0


def _build(f, z, p, g, direction, depth, eps, h0, rng):
    """A sub-tree of 2**depth leapfrog steps from (z, p) in time ``direction``."""
    if depth == 0:
        z1, p1, g1, lp1 = _leapfrog(f, z, p, g, direction * eps)
        h = -lp1 + 0.5 * float(p1 @ p1)
        ok = np.isfinite(h) and np.all(np.isfinite(g1))
        dh = h - h0 if ok else np.inf
        t = _Tree()
        t.zm = t.zp = t.z = z1
        t.pm = t.pp = p1
        t.gm = t.gp = t.g = g1
        t.lpm = t.lpp = t.lp = lp1
        t.log_w = -dh
        t.rho = p1
        t.diverged = bool(dh > MAX_DELTA_H)
        t.stop = t.diverged
        t.sum_acc = float(np.exp(min(0.0, -dh)))
        t.n = 1
        return t
    first = _build(f, z, p, g, direction, depth - 1, eps, h0, rng)
    if first.stop:
        return first
    if direction > 0:
        second = _build(f, first.zp, first.pp, first.gp, direction, depth - 1, eps, h0, rng)
    else:
        second = _build(f, first.zm, first.pm, first.gm, direction, depth - 1, eps, h0, rng)
    first.sum_acc += second.sum_acc
    first.n += second.n
    if second.stop:
        first.stop, first.diverged = True, second.diverged
        return first
    log_w = np.logaddexp(first.log_w, second.log_w)
    if np.log(rng.random()) < second.log_w - log_w:  # multinomial within the sub-tree
        first.z, first.lp, first.g = second.z, second.lp, second.g
    first.log_w = log_w
    if direction > 0:
        first.zp, first.pp, first.gp, first.lpp = second.zp, second.pp, second.gp, second.lpp
    else:
        first.zm, first.pm, first.gm, first.lpm = second.zm, second.pm, second.gm, second.lpm
    first.rho = first.rho + second.rho
    first.stop = _uturn(first.rho, first.pm, first.pp)
    return first


def nuts_step(f, z, log_prob, grad, eps, rng, max_depth=8):
    """One NUTS transition from ``z`` (whose log-density and gradient are given).

    Parameters
    ----------
    f : callable
        z -> (log-density, gradient); -inf or a NaN gradient marks a point
        outside the support.
    z : ndarray
    log_prob : float
    grad : ndarray
    eps : float
        Leapfrog step size.
    rng : numpy.random.Generator
    max_depth : int
        At most 2**max_depth - 1 leapfrog steps.

    Returns
    -------
    Transition
    """
    p0 = rng.standard_normal(z.shape)
    h0 = -log_prob + 0.5 * float(p0 @ p0)
    zm = zp = z
    pm = pp = p0
    gm = gp = grad
    new_z, new_lp, new_g = z, log_prob, grad
    log_w, rho = 0.0, p0
    sum_acc, n, depth, diverged = 0.0, 0, 0, False
    while depth < max_depth:
        direction = 1 if rng.random() < 0.5 else -1
        if direction > 0:
            sub = _build(f, zp, pp, gp, 1, depth, eps, h0, rng)
        else:
            sub = _build(f, zm, pm, gm, -1, depth, eps, h0, rng)
        depth += 1
        sum_acc += sub.sum_acc
        n += sub.n
        if sub.stop:
            diverged = sub.diverged
            break
        if np.log(rng.random()) < sub.log_w - log_w:  # biased progressive sampling
            new_z, new_lp, new_g = sub.z, sub.lp, sub.g
        log_w = np.logaddexp(log_w, sub.log_w)
        if direction > 0:
            zp, pp, gp = sub.zp, sub.pp, sub.gp
        else:
            zm, pm, gm = sub.zm, sub.pm, sub.gm
        rho = rho + sub.rho
        if _uturn(rho, pm, pp):
            break
    return Transition(z=new_z, log_prob=float(new_lp), grad=new_g,
                      accept_stat=sum_acc / max(n, 1), n_leapfrog=n, depth=depth,
                      diverged=diverged, moved=new_z is not z)


class DualAveraging:
    """Step-size adaptation of Hoffman & Gelman (2014), Algorithm 5.

    The state is a handful of floats (:meth:`state`, :meth:`from_state`) so
    that a checkpoint restores it exactly.
    """

    def __init__(self, eps0, delta=0.8, gamma=0.05, t0=10.0, kappa=0.75):
        self.mu = float(np.log(10.0 * eps0))
        self.delta, self.gamma, self.t0, self.kappa = delta, gamma, t0, kappa
        self.m = 0
        self.h_bar = 0.0
        self.log_eps = float(np.log(eps0))
        self.log_eps_bar = 0.0

    def update(self, accept_stat):
        """Record one transition's acceptance statistic; return the next step size."""
        self.m += 1
        w = 1.0 / (self.m + self.t0)
        self.h_bar = (1.0 - w) * self.h_bar + w * (self.delta - accept_stat)
        self.log_eps = self.mu - np.sqrt(self.m) / self.gamma * self.h_bar
        eta = self.m ** (-self.kappa)
        self.log_eps_bar = eta * self.log_eps + (1.0 - eta) * self.log_eps_bar
        return float(np.exp(self.log_eps))

    @property
    def final(self):
        """The averaged step size to use after adaptation."""
        return float(np.exp(self.log_eps_bar))

    def state(self):
        return [self.mu, self.delta, self.gamma, self.t0, self.kappa, self.m, self.h_bar,
                self.log_eps, self.log_eps_bar]

    @classmethod
    def from_state(cls, s):
        obj = cls.__new__(cls)
        (obj.mu, obj.delta, obj.gamma, obj.t0, obj.kappa, m, obj.h_bar, obj.log_eps,
         obj.log_eps_bar) = s
        obj.m = int(m)
        return obj


def initial_step_size(f, z, log_prob, grad, rng, eps=1.0, max_iter=50):
    """Hoffman & Gelman (2014) Algorithm 4: double or halve until one leapfrog
    step's acceptance crosses 1/2."""
    p = rng.standard_normal(z.shape)
    h0 = -log_prob + 0.5 * float(p @ p)

    def log_ratio(e):
        _, p1, g1, lp1 = _leapfrog(f, z, p, grad, e)
        h = -lp1 + 0.5 * float(p1 @ p1)
        return h0 - h if np.isfinite(h) and np.all(np.isfinite(g1)) else -np.inf

    a = 1.0 if log_ratio(eps) > np.log(0.5) else -1.0
    for _ in range(max_iter):
        r = log_ratio(eps)
        if not a * r > -a * np.log(2.0):
            break
        eps *= 2.0 ** a
    return float(eps)
