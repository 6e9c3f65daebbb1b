"""Parameter handling shared by every estimator class (scikit-learn conventions).

``__init__`` stores hyperparameters only; ``get_params``/``set_params`` read them from the
constructor signature, so ``sklearn.base.clone`` works without scikit-learn being a dependency.
"""

from __future__ import annotations

import inspect
from typing import Any, Dict, Optional


class ParamsMixin:
    """get_params / set_params / repr from the constructor signature."""

    # "classifier" or "regressor" for supervised models; None for the two-sample ratio estimators.
    _sklearn_kind: Optional[str] = None

    def __sklearn_tags__(self) -> Any:
        """Estimator tags for scikit-learn >= 1.6 (``check_is_fitted``, ``is_regressor``, ...).

        scikit-learn is imported here only: it stays an optional dependency.
        """
        from sklearn.utils import ClassifierTags, InputTags, RegressorTags, Tags, TargetTags

        kind = self._sklearn_kind
        return Tags(
            estimator_type=kind,
            target_tags=TargetTags(required=kind is not None),
            classifier_tags=ClassifierTags() if kind == "classifier" else None,
            regressor_tags=RegressorTags() if kind == "regressor" else None,
            input_tags=InputTags(),
        )

    @classmethod
    def _param_names(cls) -> list:
        sig = inspect.signature(cls.__init__)
        return [p.name for p in sig.parameters.values() if p.name != "self" and p.kind != p.VAR_KEYWORD]

    def get_params(self, deep: bool = True) -> Dict[str, Any]:
        """Hyperparameters as a dict (scikit-learn convention)."""
        return {k: getattr(self, k) for k in self._param_names()}

    def set_params(self, **params: Any) -> ParamsMixin:
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
