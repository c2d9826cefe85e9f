"""Analysis settings and the version numbers that key cached results.

Cached fits and runs are keyed by explicit schema numbers, not by hashing source files: bump
:data:`FIT_SCHEMA` when a change alters any per-trial fit column, and :data:`ANALYSIS_SCHEMA` when it alters any
derived figure, flag rule or column of a stored run. (Hashing the source broke on installs that ship only .pyc
files, and invalidated every cache on a comment edit.)
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass

from catalog.store.schema import TRIAL_FIT

#: Temperatures within this many kelvin are one set point (replicates), e.g. 35.0 and 35.1 °C.
SET_POINT_TOLERANCE = 0.5

#: Version of the per-trial kinetic fit (models, selection, signal conversion).
FIT_SCHEMA = 2
#: Version of everything derived from the fits (trial and catalyst figures, diagnostics, stored run layout).
ANALYSIS_SCHEMA = 3
FIT_VERSION = f"fit-{FIT_SCHEMA}"

#: The per-trial fit columns, in the order the store declares them (the one declaration: catalog.store.schema).
TRIAL_FIT_COLUMNS = tuple(name for name, _ in TRIAL_FIT)


@dataclass(frozen=True)
class Settings:
    """Choices that change the figures; their hash keys the cached results.

    Attributes
    ----------
    reference_temperature : float
        K; TOF, enhancement and rates are compared here.

    The remaining attributes are the diagnostic thresholds used by :mod:`catalog.analysis.diagnostics`.
    """

    reference_temperature: float = 308.15
    #: Diagnostic thresholds (see catalog.analysis.diagnostics for the meaning and source of each).
    low_ea: float = 20e3
    weisz_prater_limit: float = 0.3
    mears_limit: float = 0.15
    loading_slope_tolerance: float = 0.3
    replicate_cv_limit: float = 0.2
    min_enhancement: float = 2.0
    min_r2: float = 0.98
    runs_z_limit: float = 3.0
    late_residual_z_limit: float = -3.0
    plateau_shortfall: float = 0.85
    curvature_p_limit: float = 0.001
    min_temperatures: int = 3
    induction_z_limit: float = 5.0

    def key(self) -> str:
        """A short stable hash of the settings and the code version."""
        text = json.dumps({**asdict(self), "fit": FIT_SCHEMA, "analysis": ANALYSIS_SCHEMA}, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]
