"""catalog.core.linefit.brent_root against scipy.optimize.brentq (a reference library) and known roots."""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import optimize

from catalog.core.linefit import _weighted_line, brent_root


def _bits(value: float) -> int:
    return int(np.float64(value).view(np.int64))


@pytest.mark.parametrize(("f", "a", "b", "root"), [
    # cos x = x: 0.7390851332151607 (the fixed point of cosine; from memory, and scipy.optimize.brentq agrees).
    (lambda x: math.cos(x) - x, 0.0, 1.0, 0.7390851332151607),
    # x^3 - 2x - 5 = 0: 2.0945514815423265 (the classic test cubic; from memory, and scipy.optimize.brentq agrees).
    (lambda x: x**3 - 2 * x - 5, 2.0, 3.0, 2.0945514815423265),
])
def test_known_roots_and_the_same_double_as_scipy(f, a, b, root):
    found = brent_root(f, a, b, xtol=1e-15)
    assert found == pytest.approx(root, rel=1e-14)
    assert _bits(found) == _bits(optimize.brentq(f, a, b, xtol=1e-15))


def test_paule_mandel_extra_variance_is_the_double_scipy_finds():
    # The equation fit_line solves, sum w_i r_i^2 = n - 2 with w_i = 1 / (se_i^2 + tau^2), on random Arrhenius-like
    # lines with scatter beyond their stated errors: scipy.optimize.brentq (scipy 1.17) is the reference, exactly.
    rng = np.random.default_rng(11)
    checked = 0
    for _ in range(400):
        n = int(rng.integers(3, 25))
        x = 1 / rng.uniform(280.0, 360.0, n)
        y = -6000.0 * x + rng.normal(0.0, rng.uniform(0.05, 2.0), n)
        var = (rng.uniform(0.001, 0.3, n) * rng.choice([0.01, 0.1, 1.0])) ** 2
        if not _weighted_line(x, y, var)[0] > n - 2:
            continue
        upper = float(np.var(y) * 10 + var.max())

        def f(t2, x=x, y=y, var=var, dof=n - 2):
            return _weighted_line(x, y, var + t2)[0] - dof

        ours = brent_root(f, 0.0, upper, xtol=1e-14 * upper)
        assert _bits(ours) == _bits(optimize.brentq(f, 0.0, upper, xtol=1e-14 * upper))
        checked += 1
    assert checked > 300


def test_bad_brackets_and_no_convergence_are_errors():
    with pytest.raises(ValueError, match="different signs"):
        brent_root(lambda x: x * x + 1, -1.0, 1.0, xtol=1e-12)
    with pytest.raises(RuntimeError):
        brent_root(lambda x: math.cos(x) - x, 0.0, 1.0, xtol=1e-15, maxiter=2)
    assert brent_root(lambda x: x - 2.0, 2.0, 3.0, xtol=1e-12) == 2.0  # a root at an end of the bracket


def test_a_line_with_extra_scatter_needs_no_scipy_optimize():
    code = ("import sys\nimport numpy as np\nfrom catalog.core.linefit import fit_line\n"
            "fit_line([1.0, 2.0, 3.0, 4.0], [1.0, 2.3, 2.7, 4.4], [0.01, 0.01, 0.01, 0.01])\n"
            "print('scipy.optimize' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
