"""Statistical constants and quantiles shared by every interval the package reports.

All intervals are two-sided at :data:`CONFIDENCE`; a fit with residual degrees of freedom uses Student's t, a value
whose standard error is known (or pooled with many dof) the normal quantile :data:`Z95`.
"""

from __future__ import annotations

#: Coverage of every reported interval.
CONFIDENCE = 0.95
#: Two-sided 95 % normal quantile, Φ⁻¹(0.975) (Abramowitz and Stegun, Handbook of Mathematical Functions, table
#: 26.5; equals scipy.stats.norm.ppf(0.975)). A literal so that importing it does not load scipy.stats.
Z95 = 1.959963984540054


def t95(dof):
    """Two-sided 95 % Student-t quantile for ``dof`` degrees of freedom; :data:`Z95` where ``dof`` is infinite.

    .. math:: t_{0.975,\\nu}
    """
    from scipy import stats  # deferred: scipy.stats costs ~0.3 s to import and most commands never need it

    return stats.t.ppf(0.5 + CONFIDENCE / 2, dof)
