"""Student-t quantiles and tails of catalog.core.stats against published tables and a reference library.

References: Abramowitz and Stegun, Handbook of Mathematical Functions (1964), table 26.10 (percentage points of the
t distribution, values from memory, to the table's three decimals); scipy.special.stdtrit and fdtrc (what
scipy.stats.t.ppf and scipy.stats.f.sf evaluate), to 1e-12 relative.
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import special

from catalog.core.stats import Z95, t95, t_tail


@pytest.mark.parametrize(("dof", "quantile"), [(1, 12.706), (2, 4.303), (3, 3.182), (5, 2.571), (10, 2.228),
                                               (30, 2.042), (120, 1.980)])
def test_the_95_percent_points_of_the_published_table(dof, quantile):
    # Abramowitz and Stegun table 26.10, Q = 0.05 two-sided (from memory).
    assert t95(dof) == pytest.approx(quantile, abs=5e-4)


@pytest.mark.parametrize("dof", [*range(1, 60), 97, 100, 101, 250, 499, 500, 1001, 4000, 20001])
def test_quantile_is_scipys_to_rounding(dof):
    assert t95(dof) == pytest.approx(float(special.stdtrit(dof, 0.975)), rel=1e-12)


def test_infinite_dof_is_the_normal_quantile():
    assert t95(math.inf) == Z95


@pytest.mark.parametrize("dof", [1, 2, 3, 4, 7, 10, 31, 100, 999, 5000])
@pytest.mark.parametrize("f", [0.0, 1e-9, 1e-3, 0.2, 1.0, 3.9, 12.0, 80.0, 1e3, 1e5, 1e8])
def test_f_tail_with_one_numerator_dof_is_scipys_to_rounding(dof, f):
    # P(F_{1,nu} > F) = P(|T_nu| > sqrt(F)); relative, so a tiny p-value keeps its digits (no 1 - A cancellation).
    expected = float(special.fdtrc(1, dof, f))
    assert t_tail(math.sqrt(f), dof) == pytest.approx(expected, rel=1e-12, abs=1e-300)


def test_the_tail_is_the_survival_function_of_the_quantile():
    for dof in (3, 8, 45):
        assert t_tail(t95(dof), dof) == pytest.approx(0.05, rel=1e-13)
    assert t_tail(np.float64(2.0), np.int64(6)) == pytest.approx(float(special.stdtr(6, -2.0)) * 2, rel=1e-13)


@pytest.mark.parametrize("dof", [0, -1, 2.5])
def test_the_degrees_of_freedom_must_be_a_positive_integer(dof):
    with pytest.raises(ValueError, match="positive integer"):
        t_tail(1.0, dof)


def test_the_quantiles_load_no_scipy():
    code = ("import sys\nfrom catalog.core.stats import t95, t_tail\nt95(7)\nt_tail(2.0, 12)\n"
            "print(any(name.startswith('scipy') for name in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
