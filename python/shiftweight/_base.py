"""Parameter handling shared by every estimator class (scikit-learn conventions).

``__init__`` stores hyperparameters only; ``get_params``/``set_params`` read them from the
constructor signature, so ``sklearn.base.clone`` works without scikit-learn being a dependency.
"""

from __future__ import annotations

import inspect
from typing import Any, Dict


class ParamsMixin:
    """get_params / set_params / repr from the constructor signature."""

    @classmethod
    def _param_names(cls) -> list:
        sig = inspect.signature(cls.__init__)
        return [p.name for p in sig.parameters.values() if p.name != "self" and p.kind != p.VAR_KEYWORD]

    def get_params(self, deep: bool = True) -> Dict[str, Any]:
        """Hyperparameters as a dict (scikit-learn convention)."""
        return {k: getattr(self, k) for k in self._param_names()}

    def set_params(self, **params: Any) -> "ParamsMixin":
        """Sets hyperparameters by name; unknown names raise ValueError."""
        valid = set(self._param_names())
        for k, v in params.items():
            if k not in valid:
                raise ValueError(f"invalid parameter {k!r} for {type(self).__name__}; valid: {sorted(valid)}")
            setattr(self, k, v)
        return self

    def __repr__(self) -> str:
        sig = inspect.signature(type(self).__init__)
        parts = []
        for k in self._param_names():
            default = sig.parameters[k].default
            v = getattr(self, k)
            try:
                same = v == default
                same = bool(same) if not hasattr(same, "__len__") else False
            except Exception:  # arrays and other objects
                same = False
            if not same:
                parts.append(f"{k}={v!r}")
        return f"{type(self).__name__}({', '.join(parts)})"
