"""The element error estimate that places and refines the mesh (reactor/mesh.py).

Checks:
- against numpy's own polynomial fit: the estimate is h * max |p'(z) - f(p(z))| at the midpoints between an
  element's nodes, p the polynomial through the nodes (numpy.polynomial.Polynomial.fit, degree K through K + 1
  points, is that interpolant);
- its order: the interpolant of a smooth solution through K + 1 nodes has a derivative error O(h^K), so the estimate
  falls as h^(K+1) (R. D. Russell and J. Christiansen, "Adaptive mesh selection strategies for solving boundary
  value problems", SIAM J. Numer. Anal. 15 (1978) 59-80);
- repeatability: the same input gives the same bits (scipy's barycentric weights come from a random permutation of
  the nodes unless they are given, which once made meshes and Ipopt's iteration counts differ between runs).
"""

import numpy as np
import pytest

from tubeyield.reactor.mesh import adapted_edges, element_errors, radau_roots

K_RATE = 3.0      # du/dz = -K_RATE u, u(0) = 1: the exact solution exp(-K_RATE z)


def _rhs(z, y):
    return -K_RATE * np.asarray(y, dtype=float)


def _nodes(edges, points):
    tau = np.concatenate([[0.0], radau_roots(points)])
    edges = np.asarray(edges, dtype=float)
    z = edges[:-1, None] + np.diff(edges)[:, None] * tau[None, :]
    return np.exp(-K_RATE * z)[:, :, None], z


@pytest.mark.parametrize("points", [1, 2, 3, 5])
def test_estimate_equals_the_residual_of_numpys_interpolating_polynomial(points):
    edges = [0.0, 0.05, 0.2, 0.6, 1.0]
    values, z = _nodes(edges, points)
    got = element_errors(edges, values, _rhs, np.ones(1), points)
    tau = np.concatenate([[0.0], radau_roots(points)])
    test = 0.5 * (tau[:-1] + tau[1:])
    for k in range(len(edges) - 1):
        a, h = edges[k], edges[k + 1] - edges[k]
        p = np.polynomial.Polynomial.fit(z[k], values[k, :, 0], deg=points)
        zt = a + h * test
        want = h * np.max(np.abs(p.deriv()(zt) - _rhs(zt, p(zt))))
        assert got[k] == pytest.approx(want, rel=1e-8, abs=1e-14)


def test_estimate_falls_as_h_to_the_points_plus_one():
    points = 3
    e1 = element_errors([0.0, 0.1], _nodes([0.0, 0.1], points)[0], _rhs, np.ones(1), points)[0]
    e2 = element_errors([0.0, 0.05], _nodes([0.0, 0.05], points)[0], _rhs, np.ones(1), points)[0]
    assert e1 / e2 == pytest.approx(2.0 ** (points + 1), rel=0.05)


class _Sim:
    """The parts of a reference simulation that adapted_edges reads, for exp(-K_RATE z)."""
    class study:
        symbols = ("A",)

        class reactor:
            class mode:
                energy_balance = False
    u_in = {"A": 1.0}
    rhs = staticmethod(_rhs)

    def typical_sizes(self):
        return {"A": 1.0}

    def states_at(self, z):
        class States:
            flows = {"A": np.exp(-K_RATE * np.asarray(z, dtype=float))}
        return States


def test_same_input_same_bits():
    edges = np.linspace(0.0, 1.0, 11)
    values, _ = _nodes(edges, 3)
    first = element_errors(edges, values, _rhs, np.ones(1), 3)
    for _ in range(5):
        assert np.array_equal(element_errors(edges, values, _rhs, np.ones(1), 3), first)
    mesh = adapted_edges([_Sim()], 12, 3)
    assert all(adapted_edges([_Sim()], 12, 3) == mesh for _ in range(5))
    assert mesh[0] == 0.0 and mesh[-1] == 1.0 and len(mesh) == 13
    assert mesh[1] < 1.0 / 12      # the fast start of the exponential gets the shorter elements


def test_identical_optimizations_take_identical_paths():
    # The demo with four temperature zones places its first mesh by this estimate (jobs/problem.py, starting_mesh).
    # While the estimate varied in its last digits, so did the mesh, and the first start's Ipopt iterations went
    # 147, 83, 70 and 146 in four identical runs in one process. Now they are the same, and so is the optimum's
    # every bit.
    import sys
    from pathlib import Path
    sys.path.insert(0, str(Path(__file__).resolve().parent / "benchmarks"))
    from run import demo_text, load

    from tubeyield.jobs.optimize import optimize
    study = load(demo_text("zones"), "zones-repeat")
    runs = [optimize(study, starts=1) for _ in range(2)]
    assert [r.status for r in runs] == ["optimal", "optimal"]
    assert runs[0].starts["runs"] == runs[1].starts["runs"]
    assert runs[0].goal["value"] == runs[1].goal["value"]
    assert runs[0].check.edges == runs[1].check.edges
