"""The invented demo scenario (household electricity use in a coastal and an inland town)."""

from __future__ import annotations

from typing import Any, Dict

from . import _native

__all__ = ["demo_data"]


def demo_data(n_source: int = 2000, n_target: int = 1000, seed: int = 0, as_frame: bool = False) -> Dict[str, Any]:
    """Generates the demo scenario from a fixed seed.

    Returns a dict with ``source`` and ``target`` (rows x 6 features), ``y_source`` (daily kWh of
    the source households), ``y_target`` (daily kWh of the target households: unknown in
    practice, provided only to check estimates), and ``feature_names``. With ``as_frame=True`` the
    matrices are pandas DataFrames with named columns.

    >>> d = demo_data(100, 50, seed=1)
    >>> d["source"].shape, d["target"].shape, d["feature_names"][0]
    ((100, 6), (50, 6), 'outdoor_temp_c')
    """
    d = dict(_native.demo_electricity(n_source, n_target, seed))
    if as_frame:
        import pandas as pd

        for k in ("source", "target"):
            d[k] = pd.DataFrame(d[k], columns=d["feature_names"])
    return d
