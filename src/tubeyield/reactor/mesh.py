"""Finite-element meshes along the tube: the starting mesh, error estimates per element, and equidistribution.

A mesh is the list of element edges on [0, 1] (the scaled axial coordinate z = V / V_total). Temperature zones keep
their edges: every mesh of a zoned reactor holds the zone boundaries k / Z as element edges, so a zone is always whole
elements.

Error per element. The collocation polynomial p of the states meets the balances du/dz = f(u, z) exactly at the
Radau points of each element; between them it does not. Its residual r(z) = p'(z) - f(p(z), z) at the midpoints
between the element's nodes, scaled per species by the states' typical sizes, times the element length h, estimates
the element's local error: e_k = h_k max |r| (Russell and Christiansen, SIAM J. Numer. Anal. 15 (1978) 59-80, error
estimates for collocation from the residual at non-collocation points; Biegler, Nonlinear Programming, SIAM 2010,
section 10.4, element placement by residual and equidistribution).

Equidistribution. With K Radau points the residual is O(h^K), so e_k = C_k h_k^(K+1); a mesh on which the density
m = C^(1/(K+1)) has equal integral over every element makes every element's error the same, the classical
equidistribution principle (C. de Boor, "Good approximation by splines with variable knots II", in: Conference
on the Numerical Solution of Differential Equations, Springer LNM 363, 1974, 12-20; U. M. Ascher, R. M. M. Mattheij and R. D. Russell, Numerical Solution of
Boundary Value Problems for ODEs, SIAM 1995, section 9.3). The density is floored at a share of its mean, so that a
region where the estimate happens to vanish still keeps elements.
"""

from __future__ import annotations

import numpy as np

DENSITY_FLOOR = 0.05        # share of the mean density below which no element's density falls
POINT_SPACING = 5e-6        # pyomo.dae rounds collocation points to 6 decimals: keep them at least this far apart


def min_element(points: int) -> float:
    """The shortest element (share of the tube) whose Radau points stay distinct after pyomo.dae's rounding."""
    nodes = np.concatenate([[0.0], radau_roots(points)])
    return POINT_SPACING / float(np.min(np.diff(nodes)))


def graded_edges(n: int, grading: float = 1.0, start: float = 0.0, end: float = 1.0) -> list[float]:
    """n elements on [start, end]; with grading g the lengths grow geometrically so that last/first = g."""
    if n <= 1:
        return [start, end]
    if abs(grading - 1.0) < 1e-12:
        return [start + (end - start) * i / n for i in range(n)] + [end]
    q = grading ** (1.0 / (n - 1))
    lengths = q ** np.arange(n)
    edges = start + (end - start) * np.concatenate([[0.0], np.cumsum(lengths) / lengths.sum()])
    edges[-1] = end
    return edges.tolist()


def breakpoints(zones: int) -> list[float]:
    """Edges every mesh must hold: [0, 1/Z, ..., 1] (zones), [0, 1] otherwise."""
    return [k / zones for k in range(zones)] + [1.0] if zones > 1 else [0.0, 1.0]


def initial_edges(elements: int, grading: float = 1.0, zones: int = 1) -> list[float]:
    """The starting mesh: `elements` elements, graded over the tube (grading > 1: short elements at the inlet); with
    zones, each zone holds elements / zones of them, the grading applied in the first zone."""
    if zones <= 1:
        return graded_edges(elements, grading)
    per = max(1, elements // zones)
    edges = [0.0]
    bps = breakpoints(zones)
    for k, (a, b) in enumerate(zip(bps[:-1], bps[1:])):
        edges += graded_edges(per, grading if k == 0 else 1.0, a, b)[1:]
    return edges


def radau_roots(points: int) -> np.ndarray:
    """Radau IIA points on (0, 1] (right end included), as pyomo.dae's LAGRANGE-RADAU scheme places them."""
    from numpy.polynomial import legendre
    if points == 1:
        return np.array([1.0])
    c = np.zeros(points + 1)
    c[points - 1], c[points] = 1.0, -1.0
    x = np.sort(np.real(legendre.legroots(c)))
    return (x + 1.0) / 2.0


def element_errors(edges, nodes_values: np.ndarray, rhs, scales: np.ndarray, points: int) -> np.ndarray:
    """Local error estimate of each element from the collocation residual (module docstring).

    Parameters
    ----------
    edges : sequence of float
        Element edges on [0, 1], length n + 1.
    nodes_values : ndarray, shape (n, points + 1, m)
        The states at each element's left edge and its Radau points.
    rhs : callable
        rhs(z, y) -> dy/dz for one state vector y of length m (the reference simulation's right-hand side).
    scales : ndarray, shape (m,)
        Typical size of each state, so that every component's residual is relative.
    points : int
        Radau points per element (K).

    Returns
    -------
    ndarray, shape (n,)
        e_k = h_k max over test points and components of |p'(z) - f(p(z), z)| / scale.
    """
    test, values_at, slopes_at = _test_point_basis(points)
    edges = np.asarray(edges, dtype=float)
    h_all = np.diff(edges)
    values_all = np.einsum("tj,kjm->ktm", values_at, nodes_values)
    slopes_all = np.einsum("tj,kjm->ktm", slopes_at, nodes_values) / h_all[:, None, None]
    errors = np.zeros(len(edges) - 1)
    for k in range(len(edges) - 1):
        a, h = edges[k], h_all[k]
        worst = 0.0
        for t, y, dy in zip(test, values_all[k], slopes_all[k]):
            residual = (dy - np.asarray(rhs(a + h * t, y), dtype=float)) / scales
            worst = max(worst, float(np.max(np.abs(residual))))
        errors[k] = h * worst
    return errors


def _test_point_basis(points: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(test points, L, D): the midpoints between an element's nodes (its left edge and its Radau points) on
    [0, 1]; row t of L holds the Lagrange basis of the nodes at test point t, row t of D its derivative, so that
    p(t) = L @ nodes and p'(t) = D @ nodes. The barycentric weights are given
    explicitly, w_j = 1 / prod_(k != j) (tau_j - tau_k) (J.-P. Berrut and L. N. Trefethen, "Barycentric Lagrange
    interpolation", SIAM Review 46 (2004) 501-517, eq. 3.2): scipy computes them otherwise from a random
    permutation of the nodes, which made the estimate, and so the mesh and every solve after it, differ in the
    last digits from run to run."""
    from scipy.interpolate import BarycentricInterpolator   # here, not at the top: only refinement needs it
    tau = np.concatenate([[0.0], radau_roots(points)])
    weights = np.array([1.0 / np.prod([tj - tk for k, tk in enumerate(tau) if k != j]) for j, tj in enumerate(tau)])
    poly = BarycentricInterpolator(tau, np.eye(len(tau)), wi=weights)
    test = 0.5 * (tau[:-1] + tau[1:])
    return test, np.atleast_2d(poly(test)), np.atleast_2d(poly.derivative(test))


def equidistribute(edges, errors, n_new: int, points: int, fixed=(0.0, 1.0)) -> list[float]:
    """A mesh of n_new elements on which the estimated errors are equal (module docstring).

    `fixed` edges (zone boundaries) are kept; the elements are shared out among the intervals between them in
    proportion to each interval's integral of the density (at least one each).
    """
    edges = np.asarray(edges, dtype=float)
    h = np.diff(edges)
    errors = np.maximum(np.asarray(errors, dtype=float), 0.0)
    order = points + 1
    density = errors ** (1.0 / order) / h
    if not np.any(density > 0):
        density = np.ones_like(h)
    density = np.maximum(density, DENSITY_FLOOR * float(np.sum(density * h)))
    shortest = min_element(points)
    for _ in range(3):      # no element shorter than min_element: cap the density (the cap moves with the total)
        density = np.minimum(density, float(np.sum(density * h)) / (n_new * shortest))
    cumulative = np.concatenate([[0.0], np.cumsum(density * h)])

    def mass(z):
        return np.interp(z, edges, cumulative)

    fixed = sorted(set(float(f) for f in fixed) | {0.0, 1.0})
    masses = np.array([mass(b) - mass(a) for a, b in zip(fixed[:-1], fixed[1:])])
    share = np.maximum(1, np.floor(n_new * masses / masses.sum()).astype(int))
    while share.sum() < n_new:                      # hand out the remainder where the elements are largest
        share[int(np.argmax(masses / share))] += 1
    out = [0.0]
    for (a, b), n_k in zip(zip(fixed[:-1], fixed[1:]), share):
        levels = np.linspace(mass(a), mass(b), n_k + 1)[1:-1]
        inner = np.interp(levels, cumulative, edges)
        out += [float(x) for x in inner] + [b]
    return out


def simulation_errors(sim, edges, points: int, scales: np.ndarray) -> np.ndarray:
    """The residual estimate (element_errors) of the interpolant of a reference simulation through the nodes of a
    mesh: how well that mesh can represent this solution. Used to place elements before any optimization."""
    tau = np.concatenate([[0.0], radau_roots(points)])
    edges = np.asarray(edges, dtype=float)
    z = (edges[:-1, None] + np.diff(edges)[:, None] * tau[None, :]).ravel()
    states = sim.states_at(z)
    columns = [states.flows[s] for s in sim.study.symbols]
    if sim.study.reactor.mode.energy_balance:
        columns.append(states.T)
    values = np.stack(columns, axis=1).reshape(len(edges) - 1, points + 1, len(columns))
    return element_errors(edges, values, sim.rhs, scales, points)


def adapted_edges(sims, n: int, points: int, fixed=(0.0, 1.0), grading: float = 1.0, rounds: int = 3,
                  floor_share: float = 1e-6, tolerance: float = 0.0) -> list[float]:
    """A mesh of n elements placed for a set of simulations: start from the graded mesh and, unless the summed error
    estimate of every simulation is already within `tolerance` there, equidistribute the combined density of every
    simulation's interpolation residual, a few rounds (a fixed-point iteration: each round re-estimates on the mesh
    of the last)."""
    fixed = sorted(set(fixed))
    edges = []
    per = max(1, n // (len(fixed) - 1))
    for k, (a, b) in enumerate(zip(fixed[:-1], fixed[1:])):
        part = graded_edges(per, grading if k == 0 else 1.0, a, b)
        edges += part if not edges else part[1:]
    order = points + 1
    scales = []
    for sim in sims:
        total = sum(abs(v) for v in sim.u_in.values()) or 1.0
        sizes = sim.typical_sizes()
        scales.append(np.array([max(sizes[s], floor_share * total) for s in sim.study.symbols]
                               + ([max(sim.T_out, 1.0)] if sim.study.reactor.mode.energy_balance else [])))
    for r in range(rounds):
        h = np.diff(edges)
        errors = [simulation_errors(sim, edges, points, sc) for sim, sc in zip(sims, scales)]
        if r == 0 and all(float(np.sum(e)) <= tolerance for e in errors):
            break                                   # the starting mesh already resolves every simulation
        density = np.zeros(len(h))
        for e in errors:
            d = e ** (1.0 / order) / h
            if np.sum(d * h) > 0:
                density += d / np.sum(d * h)          # each simulation weighs the same
        if not np.any(density > 0):
            break
        # equidistribute takes errors; pass the errors that this density implies on the current mesh
        edges = equidistribute(edges, (density * h) ** order, len(h), points, fixed)
    return edges
