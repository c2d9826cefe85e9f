"""Statistical constants and quantiles shared by every interval the package reports.

All intervals are two-sided at :data:`CONFIDENCE`; a fit with residual degrees of freedom uses Student's t, a value
whose standard error is known (or pooled with many dof) the normal quantile :data:`Z95`.
"""

from __future__ import annotations

import numpy as np

#: Coverage of every reported interval.
CONFIDENCE = 0.95
#: Two-sided 95 % normal quantile, Φ⁻¹(0.975) (Abramowitz and Stegun, Handbook of Mathematical Functions, table
#: 26.5; equals scipy.stats.norm.ppf(0.975)). A literal so that importing it does not load scipy.stats.
Z95 = 1.959963984540054


def t95(dof: float | np.ndarray) -> float | np.ndarray:
    """Two-sided 95 % Student-t quantile for ``dof`` degrees of freedom; :data:`Z95` where ``dof`` is infinite.

    .. math:: t_{0.975,\\nu}
    """
    # scipy.special.stdtrit is the function scipy.stats.t.ppf evaluates; importing scipy.special alone costs a third
    # of scipy.stats (~0.5 s), and it is deferred because most commands never need a quantile.
    from scipy import special

    return special.stdtrit(dof, 0.5 + CONFIDENCE / 2)
