"""Statistics of a least-squares fit, from the weighted residuals and their Jacobian: numpy and scipy.stats only, so
that tests can feed them a known Jacobian.

References
----------
D. M. Bates and D. G. Watts, Nonlinear Regression Analysis and Its Applications, Wiley 1988: ch. 2 (linearized
covariance s^2 (J^T J)^-1 and t intervals), ch. 3 (extra sum of squares F test for nested models), ch. 6 (profile
t and likelihood intervals).
Y. Bard, Nonlinear Parameter Estimation, Academic Press 1974: the Fisher information of weighted least squares.
K. P. Burnham and D. R. Anderson, Model Selection and Multimodel Inference, 2nd ed., Springer 2002: AIC, AICc and
Akaike weights for least squares.
G. Schwarz, Estimating the dimension of a model, Ann. Statist. 6 (1978) 461: BIC.
C. J. Clopper and E. S. Pearson, The use of confidence or fiducial limits illustrated in the case of the binomial,
Biometrika 26 (1934) 404.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

NOT_DETERMINED = 1e-6     # singular value of the scaled Jacobian below this share of the largest: not determined
POORLY_DETERMINED = 1e-3  # below this share: determined only poorly (the variance along it is 1e6 times the best)


@dataclass
class Linearized:
    """The linearized statistics at a least-squares optimum."""
    ssr: float               # sum of squared weighted residuals
    n: int                   # number of residuals
    p: int                   # number of parameters
    s2: float                # residual variance used for the covariance (1 with a known error model)
    cov: np.ndarray | None   # covariance of the parameters (None: J^T J is singular)
    singular: np.ndarray     # singular values of the column-scaled Jacobian, largest first
    directions: np.ndarray   # their right singular vectors (rows), in the scaled parameters
    scales: np.ndarray       # the column scales used

    @property
    def dof(self) -> int:
        return self.n - self.p


def linearized(J: np.ndarray, r: np.ndarray, known_error: bool, scales=None) -> Linearized:
    """Covariance s^2 (J^T J)^-1 (Gauss-Newton approximation of the inverse Fisher information; Bard 1974,
    Bates and Watts 1988 ch. 2), with s^2 = SSR/(N - p) when the error is estimated and 1 when the residuals are
    already divided by known standard deviations. The singular values are those of J with its columns scaled by
    `scales` (default 1), so that parameters in different units compare."""
    J = np.asarray(J, dtype=float)
    r = np.asarray(r, dtype=float)
    n, p = J.shape
    ssr = float(r @ r)
    s2 = 1.0 if known_error else ssr / max(n - p, 1)
    scales = np.ones(p) if scales is None else np.asarray(scales, dtype=float)
    _, sv, Vt = np.linalg.svd(J * scales, full_matrices=False)
    cov = None
    if sv.size and sv[-1] > NOT_DETERMINED * sv[0]:
        try:
            cov = s2 * np.linalg.inv(J.T @ J)
        except np.linalg.LinAlgError:
            cov = None
    return Linearized(ssr, n, p, s2, cov, sv, Vt, scales)


def weak_directions(lin: Linearized, names: list[str], level: float = NOT_DETERMINED) -> list[tuple[float, dict]]:
    """The combinations of parameters the data leave (nearly) free: for each singular value below `level` times the
    largest, (its ratio, {name: weight of the unit direction in the unscaled parameters}) with the weights that
    matter (above 0.1 of the largest)."""
    out = []
    if not lin.singular.size or lin.singular[0] <= 0:
        return out
    for value, v in zip(lin.singular, lin.directions):
        ratio = float(value / lin.singular[0])
        if ratio < level:
            w = v * lin.scales
            w = w / np.max(np.abs(w))
            out.append((ratio, {names[i]: float(w[i]) for i in np.argsort(-np.abs(w)) if abs(w[i]) > 0.1}))
    return out


def t_quantile(dof: int, level: float = 0.95) -> float:
    from scipy import stats
    return float(stats.t.ppf(0.5 + level / 2.0, max(dof, 1)))


def correlation(cov: np.ndarray | None) -> list[list[float]]:
    if cov is None:
        return []
    d = np.sqrt(np.diag(cov))
    return (cov / np.outer(d, d)).tolist()


def profile_level(ssr_min: float, dof: int, known_error: bool, level: float = 0.95) -> float:
    """The SSR at which a profile-likelihood interval ends: SSR_min + chi2(1) with a known error, else
    SSR_min (1 + F(1, N - p) / (N - p)) (Bates and Watts 1988, ch. 6)."""
    from scipy import stats
    if known_error:
        return ssr_min + float(stats.chi2.ppf(level, 1))
    return ssr_min * (1.0 + float(stats.f.ppf(level, 1, dof)) / dof)


def lack_of_fit(ssr: float, dof: int, known_error: bool) -> dict:
    """With a known error the weighted SSR is chi-square with N - p degrees of freedom: the probability of a worse
    fit by chance (a small one says the model, or the stated error, is wrong). Without one there is no test
    without replicates; the estimated standard deviation is reported instead."""
    from scipy import stats
    if not known_error:
        return {"test": None}
    p = float(stats.chi2.sf(ssr, dof))
    return {"test": "chi-square", "statistic": ssr, "dof": dof, "p_value": p, "passed": p >= 0.05}


def information_criteria(ssr: float, n: int, p: int, known_error: bool) -> dict:
    """AIC, AICc and BIC of a least-squares fit (Burnham and Anderson 2002; Schwarz 1978). With an estimated error
    the variance counts as a parameter: -2 ln L = N ln(SSR/N) + const, k = p + 1; with a known error -2 ln L =
    chi-square + const, k = p. Constants common to models fitted to the same data are left out."""
    k = p if known_error else p + 1
    m2ll = ssr if known_error else n * math.log(max(ssr, 1e-300) / n)
    aic = m2ll + 2 * k
    aicc = aic + (2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.inf)
    bic = m2ll + k * math.log(n)
    return {"aic": aic, "aicc": aicc, "bic": bic, "k": k}


def akaike_weights(aicc: list[float]) -> list[float]:
    best = min(aicc)
    w = [math.exp(-0.5 * (a - best)) if math.isfinite(a) else 0.0 for a in aicc]
    total = sum(w)
    return [x / total for x in w]


def nested_test(ssr_small: float, p_small: int, ssr_big: float, p_big: int, n: int, known_error: bool) -> dict:
    """Is the bigger of two nested models better than chance? With a known error, the likelihood-ratio test
    (SSR_small - SSR_big ~ chi2(p_big - p_small)); with an estimated one, the extra-sum-of-squares F test
    F = ((SSR_small - SSR_big)/(p_big - p_small)) / (SSR_big/(N - p_big)) (Bates and Watts 1988, ch. 3). A dropped
    reaction sits on the boundary of the bigger model's parameters (k = 0), where these tests are conservative."""
    from scipy import stats
    dp = p_big - p_small
    if dp <= 0:
        return {"test": None}
    if known_error:
        stat = max(ssr_small - ssr_big, 0.0)
        return {"test": "likelihood ratio", "statistic": stat, "dof": dp, "p_value": float(stats.chi2.sf(stat, dp))}
    dof = n - p_big
    stat = max(ssr_small - ssr_big, 0.0) / dp / (ssr_big / dof) if ssr_big > 0 else math.inf
    return {"test": "extra sum of squares F", "statistic": stat, "dof": [dp, dof],
            "p_value": float(stats.f.sf(stat, dp, dof))}


def clopper_pearson(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact two-sided interval for a binomial proportion with k successes in n trials (Clopper and Pearson 1934)."""
    from scipy import stats
    if n <= 0:
        return 0.0, 1.0
    a = 1.0 - confidence
    low = 0.0 if k == 0 else float(stats.beta.ppf(a / 2, k, n - k + 1))
    high = 1.0 if k == n else float(stats.beta.ppf(1 - a / 2, k + 1, n - k))
    return low, high
