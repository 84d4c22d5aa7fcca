"""The probability-flow ODE on a manifold: its integrator and exact log-likelihoods.

The engine shared by the probability-flow sampler
(:mod:`heatwalk.samplers.probability_flow`) and the score-matching objective's
``log_prob``.

For the forward process dX = f(X, t) dt + dB_M (generator (1/2)Δ plus drift
f), the marginals p_t also solve the continuity equation of the velocity field

    v(x, t) = f(x, t) - (1/2) ∇ log p_t(x),

so the ODE dx/dt = v carries p_{t_min} to p_{t_max}, and along a solution
(instantaneous change of variables, Chen et al. 2018; on manifolds,
Mathieu & Nickel 2020)

    log p_{t_min}(x(t_min)) = log p_{t_max}(x(t_max)) + ∫_{t_min}^{t_max} div_M v(x(t), t) dt,

with div_M the Riemannian divergence of the tangent field v (not the ambient
one). Densities are w.r.t. the Riemannian volume; ``log_likelihood`` adds
``space.log_volume_density`` to report them w.r.t. the space's reference
measure.

Integration runs in the variable s = log t (the dynamics scale with t), in
tangent coordinates: over one step from x_n the state is the tangent vector
c in T_{x_n}M of the chart c -> exp_{x_n}(c); the chart velocity
d log_{x_n}[v] is taken by a central difference of log_{x_n} along v (step 1e-6
in geodesic length, error ~1e-11 relative), so any Runge–Kutta tableau keeps
its order on the manifold. Two integrators: classical fixed-step RK4, and
adaptive Dormand–Prince 5(4). The adaptive one controls its step per point by
default (``step_control="point"``): each point has its own position in time,
step size and error norm, accepts or rejects its own trial steps and leaves
the batch when it reaches the end, so one hard point does not shrink the
steps of the others; ``step_control="batch"`` shares one step size, set by
the largest error in the batch (the behaviour before per-point control). Both
cap the *attempted* steps (accepted or rejected) of a point at ``max_steps``
and raise an InputError naming the point when it is reached.

Divergence: exact, Σ_i <e_i, ∇_{e_i} v> over an orthonormal tangent basis,
each term the derivative of <e_i, v(exp_x(ε e_i))> in ε at 0 by reverse-mode
autograd (dim backward passes), for dim <= ``exact_max_dim``; above it,
Hutchinson's estimator E_z <z, ∇_z v> with z standard Gaussian tangent
vectors. The probes are drawn once per point and integration (``n_probes``
noise vectors, made into tangent vectors at every point visited by
``space.probe_tangent``, common practice for Hutchinson's estimator in
continuous normalising flows) and reused at every stage and step: the
estimated divergence is then a smooth function along the solution, which the
adaptive error control needs (fresh probes at each stage make the error
estimate noise, and the solver never accepts a step at tight tolerances).
The integral is accumulated per probe, so its standard error is that of the
mean of ``n_probes`` per-probe integrals.
"""

from __future__ import annotations

import math

import torch
from tqdm.auto import tqdm

from heatwalk.checks import check_choice, check_positive_int
from heatwalk.errors import InputError

FD_STEP = 1e-6
#: default cap on the attempted (accepted or rejected) adaptive steps of one point
MAX_STEPS = 10_000
STEP_CONTROLS = ("point", "batch")

# Dormand–Prince 5(4) tableau (Dormand & Prince 1980)
_DP_C = [0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0, 1.0]
_DP_A = [
    [],
    [1 / 5],
    [3 / 40, 9 / 40],
    [44 / 45, -56 / 15, 32 / 9],
    [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729],
    [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656],
    [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84],
]
_DP_B5 = [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0]
_DP_B4 = [5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100, 1 / 40]
_RK4_C = [0.0, 0.5, 0.5, 1.0]
_RK4_A = [[], [0.5], [0.0, 0.5], [0.0, 0.0, 1.0]]
_RK4_B = [1 / 6, 1 / 3, 1 / 3, 1 / 6]


def _bshape(space, n):
    return (n, *([1] * len(space.ambient_shape)))


class FlowField:
    """v(x, t) = f(x, t) - (1/2) s(x, t) and its Riemannian divergence, for a score field."""

    def __init__(self, field, divergence: str = "auto", exact_max_dim: int = 3, n_probes: int = 4,
                 generator: torch.Generator | None = None):
        self.field = field
        self.space = field.space
        if divergence == "auto":
            divergence = "exact" if self.space.dim <= exact_max_dim else "hutchinson"
        check_choice("divergence", divergence, ("exact", "hutchinson"))
        check_positive_int("n_probes", n_probes)
        self.divergence = divergence
        self.n_probes = n_probes
        self.generator = generator

    def velocity(self, x, t):
        return self.space.drift(x, t) - 0.5 * self.field.score(x, t)

    def draw_probes(self, x):
        """Hutchinson noise for the points ``x``: (n, n_probes, *space.probe_shape) standard normal, or None
        for the exact divergence. Drawn once per integration and held fixed along it."""
        if self.divergence == "exact":
            return None
        n = x.shape[0]
        return torch.randn(n, self.n_probes, *self.space.probe_shape, dtype=torch.float64, device=x.device,
                           generator=self.generator)

    def divergence_samples(self, x, t, probes=None):
        """v(x, t) (no_grad) and estimates of div_M v(x, t): (n, 1) exact, or (n, n_probes) Hutchinson terms.

        div_M v(x) = Σ_i <e_i, ∇_{e_i} v> = Σ_i d/dε <e_i, v(exp_x(ε e_i))> at ε = 0, the derivative taken
        along the geodesic through x with velocity e_i (so it is intrinsic: it does not depend on how
        points are stored, e.g. compositions on the simplex with tangent vectors in clr coordinates).
        The frame vectors e_i are held fixed in the stored coordinates, which is exact for the flat
        spaces and, on embedded ones, differs from parallel transport only by normal components
        that the inner product with e_i removes. Hutchinson: each column is <z, ∇_z v> for the probe
        z = space.probe_tangent(x, noise) of one column of ``probes`` (fresh noise if None); their mean
        is unbiased for the divergence.
        """
        space = self.space
        n = x.shape[0]
        x = x.detach()
        with torch.no_grad():
            v0 = self.velocity(x, t)
        if self.divergence == "exact":
            basis = space.tangent_basis(x).detach()
            dirs = [basis[:, i] for i in range(space.dim)]
        else:
            noise = self.draw_probes(x) if probes is None else probes
            dirs = [space.probe_tangent(x, noise[:, p]).detach() for p in range(noise.shape[1])]
        terms = []
        with torch.enable_grad():
            for e in dirs:
                eps = torch.zeros(n, dtype=torch.float64, device=x.device, requires_grad=True)
                y = space.exp(x, eps.reshape(_bshape(space, n)) * e)
                v = self.velocity(y, t)
                if not v.requires_grad:  # a field that does not depend on x (e.g. zero) has zero divergence
                    terms.append(torch.zeros(n, dtype=torch.float64, device=x.device))
                    continue
                (g,) = torch.autograd.grad(space.inner(x, e, v).sum(), eps)
                terms.append(g)
        terms = torch.stack(terms, dim=-1)
        if not bool(torch.isfinite(terms).all()):
            raise FloatingPointError("non-finite divergence: the velocity field is not differentiable here")
        if self.divergence == "exact":
            return v0, terms.sum(-1, keepdim=True)
        return v0, terms

    def velocity_and_divergence(self, x, t, probes=None):
        """v(x, t), div_M v(x, t) and (for Hutchinson) the standard error of the divergence estimate."""
        v0, samples = self.divergence_samples(x, t, probes)
        return (v0, *_mean_and_stderr(samples, self.divergence))


def _mean_and_stderr(samples, divergence):
    """Mean over the last axis and its standard error (0 for the exact divergence, NaN for one probe)."""
    mean = samples.mean(-1)
    if divergence == "exact":
        return mean, torch.zeros_like(mean)
    k = samples.shape[-1]
    return mean, (samples.std(-1) / math.sqrt(k) if k > 1 else torch.full_like(mean, float("nan")))


def _chart_velocity(space, x_base, y, w):
    """d/dε log_{x_base}(exp_y(ε w)) at ε = 0, by a central difference of step FD_STEP in geodesic length."""
    nrm = space.norm(y, w)
    safe = torch.where(nrm > 0, nrm, torch.ones_like(nrm))
    u = w / safe.reshape(_bshape(space, w.shape[0]))
    plus = space.log(x_base, space.exp(y, FD_STEP * u))
    minus = space.log(x_base, space.exp(y, -FD_STEP * u))
    d = (plus - minus) / (2 * FD_STEP)
    return d * nrm.reshape(_bshape(space, w.shape[0]))


def _rk_step(flow, x, s, h, tableau_a, tableau_c, with_div, probes=None):
    """One explicit RK step in s = log t in the chart at x: stage chart velocities and divergence samples.

    ``s`` and ``h`` are numbers (one step for the batch) or (n,) tensors (one per point). The stage
    divergences are (n, k) per-probe samples of dt/ds · div_M v (k = 1 for the exact divergence).
    """
    space = flow.space
    n = x.shape[0]
    per_point = isinstance(h, torch.Tensor)
    hb = h.reshape(_bshape(space, n)) if per_point else h
    ks, divs = [], []
    for j, (a_row, c) in enumerate(zip(tableau_a, tableau_c)):
        if j == 0:
            y = x
        else:
            cvec = sum(a * k for a, k in zip(a_row, ks) if a != 0.0) * hb
            y = space.exp(x, cvec)
        if per_point:
            tt = torch.exp(s + c * h)
        else:
            t = torch.exp(torch.as_tensor(s + c * h, dtype=torch.float64, device=x.device))
            tt = t.expand(n)
        if with_div:
            v, samples = flow.divergence_samples(y, tt, probes)
            divs.append(tt.unsqueeze(-1) * samples)
        else:
            with torch.no_grad():
                v = flow.velocity(y, tt)
        w = tt.reshape(_bshape(space, n)) * v  # dx/ds = t v
        ks.append(w if j == 0 else _chart_velocity(space, x, y, w))
    return ks, divs


def integrate(flow: FlowField, x, t_from: float, t_to: float, *, method: str = "rk4", steps: int = 100,
              rtol: float = 1e-5, atol: float = 1e-6, with_div: bool = True, progress: bool = False,
              max_steps: int = MAX_STEPS, step_control: str = "point", first_row: int = 0):
    """Integrate dx/dt = v(x, t) from t_from to t_to (either direction).

    ``method`` is "rk4" (``steps`` fixed steps, uniform in log t) or "dopri5" (adaptive, relative/absolute
    tolerances ``rtol``/``atol`` on each point's state and divergence integral, ``step_control`` "point" or
    "batch", at most ``max_steps`` attempted steps per point; ``first_row`` numbers the points in the
    error message). Hutchinson probes are drawn once here, for the whole integration.
    Returns (x(t_to), ∫ div_M v dt taken from t_from to t_to, standard error of that integral
    (0 for the exact divergence), accepted steps per point (n,) int64).
    """
    check_choice("method", method, ("rk4", "dopri5"))
    check_choice("step_control", step_control, STEP_CONTROLS)
    s0, s1 = math.log(t_from), math.log(t_to)
    probes = flow.draw_probes(x) if with_div else None
    if method == "rk4":
        check_positive_int("steps", steps)
        x, acc = _integrate_rk4(flow, x, s0, s1, steps, with_div, progress, probes)
        taken = torch.full((x.shape[0],), steps, dtype=torch.int64, device=x.device)
    else:
        check_positive_int("max_steps", max_steps)
        run = _integrate_dopri5_batch if step_control == "batch" else _integrate_dopri5_points
        x, acc, taken = run(flow, x, s0, s1, rtol, atol, with_div, progress, max_steps, probes, first_row, t_to)
    integral, se = _mean_and_stderr(acc, flow.divergence)
    return x, integral, se, taken


def _integrate_rk4(flow, x, s0, s1, steps, with_div, progress, probes):
    space = flow.space
    k = 1 if probes is None else probes.shape[1]
    acc = torch.zeros(x.shape[0], k, dtype=torch.float64, device=x.device)
    h = (s1 - s0) / steps
    s = s0
    for _ in tqdm(range(steps), desc="probability-flow ODE", disable=not progress, leave=False):
        ks, divs = _rk_step(flow, x, s, h, _RK4_A, _RK4_C, with_div, probes)
        x = space.exp(x, h * sum(b * k for b, k in zip(_RK4_B, ks)))
        if with_div:
            acc = acc + h * sum(b * d for b, d in zip(_RK4_B, divs))
        s = s + h
    return x, acc


def _dopri5_trial(flow, x, s, h, rtol, atol, with_div, probes):
    """One Dormand–Prince trial step: 5th-order increments (chart, divergence samples) and the error ratio (n,)."""
    space = flow.space
    ks, divs = _rk_step(flow, x, s, h, _DP_A, _DP_C, with_div, probes)
    hb = h.reshape(_bshape(space, x.shape[0])) if isinstance(h, torch.Tensor) else h
    c5 = hb * sum(b * k for b, k in zip(_DP_B5, ks) if b != 0.0)
    c4 = hb * sum(b * k for b, k in zip(_DP_B4, ks) if b != 0.0)
    ratio = space.norm(x, c5 - c4) / (atol + rtol * space.norm(x, c5))
    d5 = None
    if with_div:
        hd = h.unsqueeze(-1) if isinstance(h, torch.Tensor) else h
        d5 = hd * sum(b * d for b, d in zip(_DP_B5, divs) if b != 0.0)           # (n, k) per probe
        d4 = hd * sum(b * d for b, d in zip(_DP_B4, divs) if b != 0.0)
        m5, m4 = d5.mean(-1), d4.mean(-1)
        ratio = torch.maximum(ratio, (m5 - m4).abs() / (atol + rtol * m5.abs()))
    return c5, d5, ratio


def _step_factor(err):
    """Standard step-size update for a 5(4) pair: 0.9 err^(-1/5), clamped to [0.2, 5]."""
    if isinstance(err, torch.Tensor):
        return (0.9 * err.clamp_min(1e-10) ** -0.2).clamp(0.2, 5.0)
    return min(5.0, max(0.2, 0.9 * (1.0 / max(err, 1e-10)) ** 0.2))


def _step_limit_error(point, max_steps, accepted, t_reached, t_to, rtol, atol):
    return InputError(f"the adaptive ODE solver made {max_steps} attempted steps at point {point} "
                      f"({accepted} accepted) and reached t = {t_reached:.6g} of {t_to:.6g} (rtol={rtol}, "
                      f"atol={atol}); loosen rtol / atol, raise max_steps, or use method='rk4'", row=point,
                      field="max_steps")


def _integrate_dopri5_batch(flow, x, s0, s1, rtol, atol, with_div, progress, max_steps, probes, first_row, t_to):
    """One step size for the whole batch, set by its largest error ratio."""
    space = flow.space
    n = x.shape[0]
    acc = torch.zeros(n, 1 if probes is None else probes.shape[1], dtype=torch.float64, device=x.device)
    direction = 1.0 if s1 > s0 else -1.0
    total = abs(s1 - s0)
    h = direction * min(total, 0.05)
    s, taken, attempts = s0, 0, 0
    bar = tqdm(total=total, desc="probability-flow ODE (adaptive)", disable=not progress, leave=False)
    while direction * (s1 - s) > 1e-12:
        if attempts >= max_steps:
            raise _step_limit_error(first_row, max_steps, taken, math.exp(s), t_to, rtol, atol)
        h = direction * min(abs(h), abs(s1 - s))
        c5, d5, ratio = _dopri5_trial(flow, x, s, h, rtol, atol, with_div, probes)
        attempts += 1
        err = float(ratio.max())
        if err <= 1.0:
            x = space.exp(x, c5)
            if with_div:
                acc = acc + d5
            s = s + h
            taken += 1
            bar.update(abs(h))
        h = h * _step_factor(err)
    bar.close()
    return x, acc, torch.full((n,), taken, dtype=torch.int64, device=x.device)


def _integrate_dopri5_points(flow, x, s0, s1, rtol, atol, with_div, progress, max_steps, probes, first_row, t_to):
    """Each point its own time, step size and error norm; a point leaves the batch when it reaches s1."""
    space = flow.space
    n, dev = x.shape[0], x.device
    acc = torch.zeros(n, 1 if probes is None else probes.shape[1], dtype=torch.float64, device=dev)
    direction = 1.0 if s1 > s0 else -1.0
    total = abs(s1 - s0)
    s = torch.full((n,), s0, dtype=torch.float64, device=dev)
    h = torch.full((n,), direction * min(total, 0.05), dtype=torch.float64, device=dev)
    taken = torch.zeros(n, dtype=torch.int64, device=dev)
    attempts = torch.zeros(n, dtype=torch.int64, device=dev)
    bar = tqdm(total=total, desc="probability-flow ODE (adaptive, per point)", disable=not progress, leave=False)
    done = 0.0
    while True:
        active = (direction * (s1 - s) > 1e-12).nonzero().squeeze(-1)
        if active.numel() == 0:
            break
        worn = attempts[active] >= max_steps
        if bool(worn.any()):
            i = int(active[worn][0])
            raise _step_limit_error(first_row + i, max_steps, int(taken[i]), math.exp(float(s[i])), t_to, rtol, atol)
        sa = s[active]
        ha = direction * torch.minimum(h[active].abs(), (s1 - sa).abs())
        xa = x[active]
        c5, d5, ratio = _dopri5_trial(flow, xa, sa, ha, rtol, atol, with_div,
                                      None if probes is None else probes[active])
        attempts[active] += 1
        ok = ratio <= 1.0
        good = active[ok]
        if good.numel():
            x = x.index_copy(0, good, space.exp(xa[ok], c5[ok]))
            if with_div:
                acc = acc.index_add(0, good, d5[ok])
            s = s.index_copy(0, good, sa[ok] + ha[ok])
            taken[good] += 1
        h = h.index_copy(0, active, ha * _step_factor(ratio))
        if progress:
            now = float((direction * (s - s0)).clamp(0, total).mean())
            bar.update(now - done)
            done = now
    bar.close()
    return x, acc, taken


def log_likelihood(field, x, *, method: str = "dopri5", steps: int = 100, rtol: float = 1e-5,
                   atol: float = 1e-6, divergence: str = "auto", n_probes: int = 4,
                   generator: torch.Generator | None = None, progress: bool = False, batch_size: int = 1024,
                   step_control: str = "point", max_steps: int = MAX_STEPS):
    """log p_{t_min}(x) in nats w.r.t. the space's reference measure, by the probability-flow ODE.

    Points are integrated in blocks of ``batch_size`` (one network call per stage for the block's
    points still moving). Returns a dict: ``log_prob`` (n,), ``stderr`` (n,) of the Hutchinson
    estimate (0 if exact), ``divergence`` (which estimator), ``steps`` (per block, the most accepted
    steps of one of its points) and ``point_steps`` (n,) accepted steps per point.
    """
    space = field.space
    x = space.validate(x)
    check_positive_int("batch_size", batch_size)
    t_min, t_max = field.schedule.t_min, field.schedule.t_max
    flow = FlowField(field, divergence=divergence, n_probes=n_probes, generator=generator)
    out, errs, taken = [], [], []
    for i in tqdm(range(0, x.shape[0], batch_size), desc="log-likelihood", disable=not progress, leave=False):
        xb = x[i:i + batch_size]
        xT, div_int, se, k = integrate(flow, xb, t_min, t_max, method=method, steps=steps, rtol=rtol,
                                       atol=atol, with_div=True, step_control=step_control, max_steps=max_steps,
                                       first_row=i)
        out.append(space.prior_log_prob(xT) + div_int + space.log_volume_density(xb))
        errs.append(se)
        taken.append(k)
    return {"log_prob": torch.cat(out), "stderr": torch.cat(errs), "divergence": flow.divergence,
            "steps": [int(k.max()) for k in taken], "point_steps": torch.cat(taken)}
