"""The invented demo scenario (household electricity use in a coastal and an inland town)."""

from __future__ import annotations

from typing import Any, Dict, List, Tuple

from . import _native

__all__ = ["demo_data"]


def _frame(columns: List[Tuple[str, Any]]) -> Any:
    import pandas as pd

    data = {}
    for name, values in columns:
        if isinstance(values, tuple):
            levels, codes = values
            data[name] = pd.Categorical.from_codes(codes, categories=levels)
        else:
            data[name] = values
    return pd.DataFrame(data)


def demo_data(n_source: int = 2000, n_target: int = 1000, seed: int = 0, as_frame: bool = False) -> Dict[str, Any]:
    """Generates the demo scenario from a fixed seed.

    Returns a dict with ``source`` and ``target``, ``y_source`` (daily kWh of the source
    households), ``y_target`` (daily kWh of the target households: unknown in practice, provided
    only to check estimates), and ``feature_names``.

    By default ``source`` and ``target`` are complete numeric matrices (rows x 6: every home's age
    known, ``electric_heating`` 0/1) and ``feature_names`` names their columns. With
    ``as_frame=True`` they are the same rows as the supplier records them: pandas DataFrames with
    the categorical column ``heating`` (gas, oil, heat pump, direct electric) and missing values
    in ``home_age_years`` (homes missing from the building register); ``feature_names`` then names
    the frame's columns, and ``source_numeric`` and ``target_numeric`` hold the complete numeric
    view as DataFrames. In both views consumption given the features follows the same rule in both
    towns (pure covariate shift; see the module documentation of ``shiftweight::demo``).

    >>> d = demo_data(100, 50, seed=1)
    >>> d["source"].shape, d["target"].shape, d["feature_names"][0]
    ((100, 6), (50, 6), 'outdoor_temp_c')
    >>> f = demo_data(100, 50, seed=1, as_frame=True)
    >>> str(f["source"]["heating"].dtype), list(f["source"]["heating"].cat.categories)
    ('category', ['gas', 'oil', 'heat pump', 'direct electric'])
    """
    native = _native.demo_electricity(n_source, n_target, seed)
    typed = {"source": native["source_columns"], "target": native["target_columns"]}
    d: Dict[str, Any] = {k: v for k, v in native.items() if k not in ("source_columns", "target_columns")}
    if as_frame:
        import pandas as pd

        for k in ("source", "target"):
            d[k + "_numeric"] = pd.DataFrame(d[k], columns=d["feature_names"])
            d[k] = _frame(typed[k])
        d["feature_names"] = list(d["source"].columns)
    return d
