"""Calling a pair *unrelated* by effect size: equivalence tests.

A p-value above α says only that the data could not show a relation. With many rows, tiny
partial correlations become "significant" and every pair looks related; with few rows,
everything looks unrelated. The **equivalence** rule turns the question round: a pair is called
unrelated only when the data show that its effect lies *within a margin* ``±δ``, by two
one-sided tests (TOST; Schuirmann 1987):

- H0⁻: ρ ≤ −δ against ρ > −δ, and H0⁺: ρ ≥ δ against ρ < δ;
- both are rejected at level α when ``p = max(p⁻, p⁺) ≤ α``; that ``p`` is the pair's
  *equivalence p-value*.

For Fisher's z the tests are on Fisher's scale: ``ζ = atanh(r)`` is approximately normal with
standard error ``1 / sqrt(n − |S| − 3)`` (Fisher 1921), so with ``ζδ = atanh(δ)``

    p⁻ = 1 − Φ((ζ + ζδ) · sqrt(n − |S| − 3)),    p⁺ = Φ((ζ − ζδ) · sqrt(n − |S| − 3)).

For G² (discrete data) the effect is the conditional mutual information ``MI`` and ``G² =
2 n MI`` (natural logarithms). Under the boundary ``MI = m_δ`` the statistic is approximately
noncentral χ² with the test's degrees of freedom and noncentrality ``λ = 2 n m_δ`` (the usual
local-alternative approximation of likelihood-ratio tests; Agresti 2002, §6.6), and the
one-sided test of H0: ``MI ≥ m_δ`` has ``p = F_{χ²(df, λ)}(G²)``. The margin is given on the
same scale as for Fisher's z: ``m_δ = −½ ln(1 − δ²)``, the mutual information of two Gaussian
variables with correlation δ, so that one δ means "as weak as a correlation of δ" for both
tests.

Worked example: with n = 200,000 rows and no conditioning, r = 0.02 gives z = 8.9 and a
two-sided p of 3.7e-19: "significant" at any usual α. With δ = 0.05, ``p⁺ = Φ((atanh 0.02 −
atanh 0.05) · sqrt(199,997)) = Φ(−13.4) = 1.9e-41`` (and ``p⁻`` is far smaller): the data
show the correlation lies within ±0.05, and the equivalence rule calls the pair unrelated.

A pair that neither rule can decide (the significance test does not reject independence, and
the equivalence test does not show the effect within the margin) is *undecided*: the data are
too few to tell. The search keeps such pairs adjacent and lists them.

References
----------
Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the power
approach for assessing the equivalence of average bioavailability. *Journal of
Pharmacokinetics and Biopharmaceutics* 15, 657–680.

Fisher, R. A. (1921). On the "probable error" of a coefficient of correlation deduced from a
small sample. *Metron* 1, 3–32.

Agresti, A. (2002). *Categorical Data Analysis*, 2nd ed. Wiley.
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtr
from scipy.stats import ncx2

from ..exceptions import SettingsError
from ..independence import FisherZ, GSquared, IndependenceTest

__all__ = ["EquivalenceTest", "fisher_z_equivalence_pvalue", "g_squared_equivalence_pvalue",
           "EQUIVALENCE_TESTS"]

#: Tests for which the equivalence rule is defined.
EQUIVALENCE_TESTS = ("fisher-z", "g-squared")

_R_MAX = 1.0 - 1e-12


def fisher_z_equivalence_pvalue(r, n_eff, margin: float) -> np.ndarray:
    """Equivalence p-value (TOST on Fisher's z scale) that ``|ρ| < margin``.

    Parameters
    ----------
    r : float or array
        Sample (partial) correlations.
    n_eff : float or array
        ``n − |S| − 3`` (NaN or ≤ 0 gives a NaN p-value).
    margin : float in (0, 1)

    Returns
    -------
    ndarray
        ``max(p⁻, p⁺)``; small values show the correlation lies within ``±margin``.
    """
    r = np.clip(np.asarray(r, dtype=float), -_R_MAX, _R_MAX)
    n_eff = np.asarray(n_eff, dtype=float)
    with np.errstate(invalid="ignore"):
        scale = np.sqrt(np.where(n_eff > 0, n_eff, np.nan))
        z = np.arctanh(r)
        zd = np.arctanh(margin)
        p_low = ndtr(-(z + zd) * scale)   # H0: rho <= -margin
        p_high = ndtr((z - zd) * scale)   # H0: rho >= +margin
    return np.maximum(p_low, p_high)


def g_squared_equivalence_pvalue(g2, dof, n, margin: float) -> np.ndarray:
    """Equivalence p-value that the (conditional) mutual information is below ``m_δ``.

    ``p = F(G²)`` of the noncentral χ² with ``dof`` degrees of freedom and noncentrality
    ``2 n m_δ``, ``m_δ = −½ ln(1 − margin²)``. Tests with no degree of freedom or no
    statistic (skipped by the minimum-rows rule) get 1: equivalence not shown.
    """
    g2 = np.asarray(g2, dtype=float)
    dof = np.asarray(dof, dtype=float)
    n = np.asarray(n, dtype=float)
    m_delta = -0.5 * np.log1p(-margin * margin)
    ok = np.isfinite(g2) & (dof > 0) & (n > 0)
    out = np.ones(np.broadcast(g2, dof, n).shape)
    if ok.any():
        g2b, dofb, nb = np.broadcast_arrays(g2, dof, n)
        out[ok] = ncx2.cdf(g2b[ok], dofb[ok], 2.0 * nb[ok] * m_delta)
    return out


class EquivalenceTest(IndependenceTest):
    """A test whose p-values are *equivalence* p-values: small means "shown unrelated".

    Wraps a :class:`~discovery.independence.FisherZ` or
    :class:`~discovery.independence.GSquared`; the statistic it reports is the sample partial
    correlation (Fisher's z) or G² (G²). The search calls a pair unrelated when this p-value
    is **at most** α (the opposite direction of the usual rule).

    Parameters
    ----------
    inner : FisherZ or GSquared
    margin : float in (0, 1)

    Raises
    ------
    SettingsError
        The test has no effect size to bound (only fisher-z and g-squared do).
    """

    vectorised = True

    def __init__(self, inner: IndependenceTest, margin: float):
        if not isinstance(inner, (FisherZ, GSquared)):
            raise SettingsError(
                f"unrelated='equivalence' works with the tests {', '.join(EQUIVALENCE_TESTS)}; "
                f"test {inner.name!r} has no effect size to bound: use "
                "unrelated='significance' or another test")
        self.inner = inner
        self.margin = float(margin)
        self.name = inner.name
        self.variables = inner.variables
        self.n = inner.n
        self.vectorised = inner.vectorised

    def settings_key(self) -> tuple:
        return ("equivalence", self.margin) + tuple(self.inner.settings_key())

    def association(self):
        return self.inner.association()

    def significance_pvalues(self, idx: np.ndarray) -> np.ndarray:
        """The inner test's usual p-values for the same rows (to find undecided pairs)."""
        return self.inner.pvalues_array(idx)

    def _batch_array(self, idx):
        idx = np.asarray(idx, dtype=np.intp)
        inner = self.inner
        if isinstance(inner, FisherZ):
            from ..independence._fisher_z import _partial_correlations
            if inner._corr is not None:
                r = _partial_correlations(inner._corr, idx)
                n_eff = float(inner.n - (idx.shape[1] - 2) - 3)
            else:
                r, n_eff = inner._testwise(idx)
            return r, fisher_z_equivalence_pvalue(r, n_eff, self.margin)
        stats = np.array([inner.g2_dof_rows(int(row[0]), int(row[1]),
                                            tuple(int(v) for v in row[2:]))
                          for row in idx], dtype=float).reshape(-1, 3)
        return stats[:, 0], g_squared_equivalence_pvalue(stats[:, 0], stats[:, 1],
                                                         stats[:, 2], self.margin)
