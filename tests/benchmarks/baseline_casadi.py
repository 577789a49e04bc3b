"""Baseline 1: the model an expert writes by hand in casadi (SX), Radau collocation on finite elements.

Same problem and discretization as tubeyield's model (uniform elements, 3 Radau points, the same scaling), solved
with the same Ipopt in the casadi wheel and the same options. Built once; re-solves pass new parameters (the front
level, sweep kinetics) without a rebuild, as an expert would.
"""

from __future__ import annotations

import time

import casadi as ca
import numpy as np

from problem import Problem

IPOPT = {"mu_strategy": "adaptive", "mumps_scaling": 8, "mumps_permuting_scaling": 0, "tol": 1e-10,
         "acceptable_tol": 1e-7, "max_iter": 1000, "bound_push": 1e-8, "bound_frac": 1e-8,
         "bound_mult_init_method": "mu-based", "bound_relax_factor": 0.0, "print_level": 0, "sb": "yes"}


def radau(K: int):
    """Collocation points (0 and K right-Radau points) and the derivative matrix of the Lagrange basis."""
    tau = np.append(0.0, ca.collocation_points(K, "radau"))
    D = np.zeros((K + 1, K + 1))
    for j in range(K + 1):
        p = np.poly1d([1.0])
        for r in range(K + 1):
            if r != j:
                p = p * np.poly1d([1.0, -tau[r]]) / (tau[j] - tau[r])
        dp = np.polyder(p)
        for r in range(K + 1):
            D[j, r] = dp(tau[r])
    return tau, D


class CollocationModel:
    def __init__(self, pb: Problem, elements: int = 40, K: int = 3, front_metric=None, goal=None):
        t0 = time.perf_counter()
        self.pb, self.E, self.K = pb, elements, K
        n = len(pb.species)
        tau_pts, D = radau(K)
        h = 1.0 / elements
        w, lbw, ubw, g, lbg, ubg = [], [], [], [], [], []
        s_tau = ca.SX.sym("s_tau")
        w.append(s_tau); lbw.append(pb.tau[0] / pb.tau[1]); ubw.append(1.0)
        s_ratio = ca.SX.sym("ratio")
        w.append(s_ratio); lbw.append(pb.ratio[0]); ubw.append(pb.ratio[1])
        Tlo, Thi = pb.T[0] / pb.T_scale, pb.T[1] / pb.T_scale
        if pb.heat == "isothermal":
            th = ca.SX.sym("theta")
            w.append(th); lbw.append(Tlo); ubw.append(Thi)
            theta = lambda e, k: th
        elif pb.heat == "zones":
            ths = [ca.SX.sym(f"theta_{z}") for z in range(pb.zones)]
            for t in ths:
                w.append(t); lbw.append(Tlo); ubw.append(Thi)
            per = elements // pb.zones
            theta = lambda e, k: ths[e // per]
        else:
            thp = {}
            for e in range(elements):
                for k in range(1, K + 1):
                    thp[e, k] = ca.SX.sym(f"theta_{e}_{k}")
                    w.append(thp[e, k]); lbw.append(Tlo); ubw.append(Thi)
            theta = lambda e, k: thp[e, k]
        u0 = pb.inlet(s_ratio, ca)
        X0 = ca.vertcat(*u0)
        tau = s_tau * pb.tau[1]
        Xk = X0
        self.states = []
        # Species in no rate law have no bound inside elements (their stage values feed nothing back), as in
        # tubeyield's model; every state is at zero or above at the element ends.
        inert = ~np.any(pb.orders != 0, axis=0)
        for e in range(elements):
            Xc = []
            for k in range(1, K + 1):
                x = ca.SX.sym(f"x_{e}_{k}", n)
                w.append(x); lbw += [-ca.inf if inert[i] and k < K else 0.0 for i in range(n)]; ubw += [ca.inf] * n
                Xc.append(x)
            for k in range(1, K + 1):
                xp = D[0, k] * Xk
                for j in range(1, K + 1):
                    xp = xp + D[j, k] * Xc[j - 1]
                T = pb.T_scale * theta(e, k)
                r = pb.rates([Xc[k - 1][i] for i in range(n)], T, ca)
                f = ca.mtimes(ca.DM(pb.N), ca.vertcat(*r)) * tau / pb.c_ref
                g.append(xp - h * f); lbg += [0.0] * n; ubg += [0.0] * n
            Xk = Xc[-1]
            self.states.append(Xc)
        u_out = [Xk[i] for i in range(n)]
        kind, gi = goal or ("yield", pb.product)
        goal = pb.metric(kind, gi, u_out, u0)
        for kind, i, sense, bound in pb.limits:
            g.append(pb.metric(kind, i, u_out, u0))
            lbg.append(bound if sense == ">=" else -ca.inf)
            ubg.append(ca.inf if sense == ">=" else bound)
        p = ca.SX.sym("level")
        if front_metric is not None:
            kind, i = front_metric
            g.append(pb.metric(kind, i, u_out, u0) - p)
            lbg.append(0.0); ubg.append(ca.inf)
        self.lbw, self.ubw, self.lbg, self.ubg = np.array(lbw), np.array(ubw), np.array(lbg), np.array(ubg)
        self.w = ca.vertcat(*w)
        self.solver = ca.nlpsol("expert", "ipopt", {"x": self.w, "f": -goal, "g": ca.vertcat(*g), "p": p},
                                {"expand": True, "print_time": False, "ipopt": IPOPT})
        self.goal_fn = ca.Function("goal", [self.w], [goal])
        self.build_seconds = time.perf_counter() - t0
        self.last = None

    def initial_guess(self, tau, T, ratio, profile=None) -> np.ndarray:
        """Decisions and states at the start; `profile(z)` gives scaled states (a simulation), else the inlet."""
        pb = self.pb
        x = [tau / pb.tau[1], ratio]
        if pb.heat == "isothermal":
            x.append(T / pb.T_scale)
        elif pb.heat == "zones":
            x += [T / pb.T_scale] * pb.zones
        else:
            x += [T / pb.T_scale] * (self.E * self.K)
        tau_pts, _ = radau(self.K)
        u0 = np.array(pb.inlet(ratio))
        for e in range(self.E):
            for k in range(1, self.K + 1):
                z = (e + tau_pts[k]) / self.E
                x += list(profile(z) if profile is not None else u0)
        return np.array(x, dtype=float)

    def solve(self, x0, level=0.0, warm=None):
        args = dict(x0=x0, lbx=self.lbw, ubx=self.ubw, lbg=self.lbg, ubg=self.ubg, p=level)
        if warm is not None:
            args.update(lam_x0=warm["lam_x"], lam_g0=warm["lam_g"])
        sol = self.solver(**args)
        st = self.solver.stats()
        self.last = sol
        return {"value": float(self.goal_fn(sol["x"])), "x": np.array(sol["x"]).ravel(),
                "status": st["return_status"], "iterations": st["iter_count"], "sol": sol}


def simulate_profile(pb: Problem, tau, T, ratio):
    """The start profile from scipy (what the expert does to initialize)."""
    from scipy.integrate import solve_ivp
    u0 = np.array(pb.inlet(ratio), dtype=float)

    def rhs(z, u):
        r = pb.rates(np.maximum(u, 0.0), T)
        return pb.N @ np.array(r) * tau / pb.c_ref

    sol = solve_ivp(rhs, (0, 1), u0, method="LSODA", rtol=1e-8, atol=1e-12, dense_output=True)
    return lambda z: sol.sol(z)


def optimize(pb: Problem, start: dict, elements: int = 40):
    """Build, initialize from a simulation at `start`, solve. Returns value, time, iterations."""
    t0 = time.perf_counter()
    model = CollocationModel(pb, elements)
    prof = simulate_profile(pb, start["tau"], start["T"], start["ratio"])
    res = model.solve(model.initial_guess(start["tau"], start["T"], start["ratio"], prof))
    res["seconds"] = time.perf_counter() - t0
    res["build_seconds"] = model.build_seconds
    return res


def front(pb: Problem, start: dict, levels, metric, goal, elements: int = 40):
    """Epsilon-constraint front with one built solver: the level is a parameter, each solve warm-started."""
    t0 = time.perf_counter()
    model = CollocationModel(pb, elements, front_metric=metric, goal=goal)
    prof = simulate_profile(pb, start["tau"], start["T"], start["ratio"])
    x = model.initial_guess(start["tau"], start["T"], start["ratio"], prof)
    out = []
    warm = None
    for level in levels:
        res = model.solve(x, level, warm)
        x, warm = res["x"], {"lam_x": res["sol"]["lam_x"], "lam_g": res["sol"]["lam_g"]}
        res.pop("sol")
        out.append(res)
    return out, time.perf_counter() - t0
