"""Which two figures a trade-off (Pareto) plot compares, and which catalysts on it carry a transport warning.

A chemist weighs activity against what it costs to have it: price, stability, selectivity over the background.
A low apparent Ea is not a merit (a transport-limited rate shows a low Ea), so it is never an axis here.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from catalog.analysis import ranking
from catalog.present import labels

__all__ = ["ACTIVITY", "TRANSPORT_CODES", "trade_off_axes", "transport_warnings"]

#: Figures that measure activity; ranking on one of them puts it on the activity axis.
ACTIVITY = ("tof", "rate_per_mass", "rate_per_area", "rate_per_cost")
#: Flag codes saying the rate may measure mass transfer rather than the catalyst (catalog.analysis.diagnostics).
TRANSPORT_CODES = ("transport-ea", "weisz-prater", "mears", "loading-slope")
# Counterparts to activity, in order of preference: cost, then stability (largest TON), then the rate
# enhancement over the uncatalysed blank. The first one known for two or more catalysts is used.
_COUNTERPARTS = ("cost", "ton", "enhancement")


def trade_off_axes(catalysts: pd.DataFrame, metric: str = "tof") -> tuple[str, str]:
    """``(activity, counterpart)`` ranking-figure keys for a trade-off plot.

    Activity is ``metric`` when it is an activity figure, else TOF. The counterpart is the first of price per gram,
    largest TON and rate enhancement (other than the activity figure) with values for at least two catalysts.
    """
    activity = metric if metric in ACTIVITY else "tof"
    for key in _COUNTERPARTS:
        column = ranking.METRICS[key].column
        if column in catalysts.columns and np.isfinite(pd.to_numeric(catalysts[column], errors="coerce")).sum() >= 2:
            return activity, key
    return activity, "enhancement"


def transport_warnings(catalysts: pd.DataFrame) -> dict[str, str]:
    """Catalyst id → the plain titles of its transport flags, for every catalyst that has one."""
    if "flags" not in catalysts.columns:
        return {}
    out = {}
    for cid, cell in catalysts["flags"].fillna("").astype(str).items():
        codes = [c for c in cell.split(";") if c.strip() in TRANSPORT_CODES]
        if codes:
            out[str(cid)] = "; ".join(labels.flag_title(c.strip()) for c in codes)
    return out
