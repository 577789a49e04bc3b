"""Baseline 2: the usual script, single shooting: solve_ivp inside scipy.optimize.minimize (SLSQP) with
finite-difference gradients. Integrator: LSODA at rtol 1e-10, atol 1e-14 (the accuracy of tubeyield's check);
SLSQP ftol 1e-14 on decisions scaled to [0, 1]."""

from __future__ import annotations

import time

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import minimize

from problem import Problem

RTOL, ATOL = 1e-10, 1e-14


class Shooting:
    def __init__(self, pb: Problem, elements: int = 40, K: int = 3):
        self.pb = pb
        self.n_T = 1 if pb.heat == "isothermal" else pb.zones if pb.heat == "zones" else elements * K
        self.E, self.K = elements, K
        self.calls = 0

    def unpack(self, x):
        pb = self.pb
        tau = pb.tau[0] + x[0] * (pb.tau[1] - pb.tau[0])
        ratio = pb.ratio[0] + x[1] * (pb.ratio[1] - pb.ratio[0])
        T = pb.T[0] + np.asarray(x[2:]) * (pb.T[1] - pb.T[0])
        return tau, ratio, T

    def pack(self, tau, ratio, T):
        pb = self.pb
        T = np.atleast_1d(T) * np.ones(self.n_T)
        return np.concatenate([[(tau - pb.tau[0]) / (pb.tau[1] - pb.tau[0]),
                                (ratio - pb.ratio[0]) / (pb.ratio[1] - pb.ratio[0]) if pb.ratio[1] > pb.ratio[0] else 0.0],
                               (T - pb.T[0]) / (pb.T[1] - pb.T[0])])

    def outlet(self, x):
        key = tuple(np.asarray(x, dtype=float))
        cache = getattr(self, "_cache", (None, None))
        if cache[0] == key:
            return cache[1]
        out = self._outlet(x)
        self._cache = (key, out)
        return out

    def _outlet(self, x):
        self.calls += 1
        pb = self.pb
        tau, ratio, T = self.unpack(x)
        u = np.array(pb.inlet(ratio), dtype=float)
        u0 = u.copy()
        if pb.heat == "isothermal":
            segs = [(0.0, 1.0, lambda z: T[0])]
        elif pb.heat == "zones":
            segs = [(z / pb.zones, (z + 1) / pb.zones, (lambda v: (lambda zz: v))(T[z])) for z in range(pb.zones)]
        else:
            # T at the Radau points of each element, Lagrange interpolation inside the element (as the collocation)
            from baseline_casadi import radau
            pts = radau(self.K)[0][1:]
            segs = []
            for e in range(self.E):
                vals = T[e * self.K:(e + 1) * self.K]
                a, b = e / self.E, (e + 1) / self.E

                def fT(z, vals=vals, a=a, b=b):
                    s = (z - a) / (b - a)
                    tot = 0.0
                    for i, ri in enumerate(pts):
                        basis = 1.0
                        for j, rj in enumerate(pts):
                            if j != i:
                                basis *= (s - rj) / (ri - rj)
                        tot += basis * vals[i]
                    return tot
                segs.append((a, b, fT))
        for a, b, fT in segs:
            sol = solve_ivp(lambda z, y: pb.N @ np.array(pb.rates(np.maximum(y, 0.0), fT(z))) * tau / pb.c_ref,
                            (a, b), u, method="LSODA", rtol=RTOL, atol=ATOL)
            u = sol.y[:, -1]
        return u, u0

    def optimize(self, x0, extra=None, maxiter=500, goal=None):
        pb = self.pb
        kind, gi = goal or ("yield", pb.product)
        self._cache = (None, None)

        def f(x):
            u, u0 = self.outlet(x)
            return -pb.metric(kind, gi, u, u0)

        cons = []
        for lim_kind, lim_i, sense, bound in pb.limits + (extra or []):
            sign = 1.0 if sense == ">=" else -1.0
            cons.append({"type": "ineq", "fun": (lambda x, k=lim_kind, i=lim_i, sign=sign, bound=bound:
                                                 sign * (pb.metric(k, i, *self.outlet(x)) - bound))})
        t0 = time.perf_counter()
        res = minimize(f, x0, method="SLSQP", bounds=[(0.0, 1.0)] * len(x0), constraints=cons,
                       options={"ftol": 1e-14, "maxiter": maxiter, "eps": 1e-8})
        return {"value": -float(res.fun), "x": res.x, "status": res.message, "success": bool(res.success),
                "iterations": int(res.nit), "seconds": time.perf_counter() - t0, "simulations": self.calls}


def front(pb: Problem, x0, levels, metric, goal):
    """Epsilon-constraint front by repeated SLSQP solves, each from the previous optimum."""
    shoot = Shooting(pb)
    kind, i = metric
    x, out = x0, []
    for level in levels:
        res = shoot.optimize(x, extra=[(kind, i, ">=", level)], goal=goal, maxiter=300)
        x = res["x"]
        out.append(res["value"])
    return out
