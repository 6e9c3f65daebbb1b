"""shiftweight: covariate-shift tools for models trained on one population and used on another.

Detect whether deployment inputs differ from training inputs and where, estimate importance
weights w(x) = p_target(x) / p_source(x) with data-chosen hyperparameters, check and stabilise
them, retrain with them, and estimate target performance before target labels exist.

Cautions: weighting corrects covariate shift only (not label or concept shift); it fails where
the source does not cover the target; validate on labelled target data before relying on it; and
defer to the regulations and review processes of your domain. Load pickles only from trusted
sources; JSON model files are the safe exchange format.
"""

from ._native import (
    InternalError,
    ModelFileError,
    NumericalError,
    ShiftweightError,
    UnsupportedOperationError,
    __version__,
    set_threads,
)
from ._validation import NotFittedError
from ._ratio import LeastSquaresRatio, from_json
from ._learn import WeightedLogistic, WeightedRidge
from ._demo import demo_data
from ._weights import (
    ClipTradeoff,
    OverlapReport,
    StabilizeReport,
    WeightDiagnosis,
    check_overlap,
    clip_for_ess,
    clip_tradeoff,
    diagnose,
    effective_sample_size,
    pareto_k,
    stabilize,
)

__all__ = [
    "LeastSquaresRatio",
    "WeightedLogistic",
    "WeightedRidge",
    "from_json",
    "demo_data",
    "stabilize",
    "StabilizeReport",
    "effective_sample_size",
    "pareto_k",
    "diagnose",
    "WeightDiagnosis",
    "clip_tradeoff",
    "ClipTradeoff",
    "clip_for_ess",
    "check_overlap",
    "OverlapReport",
    "set_threads",
    "ShiftweightError",
    "ModelFileError",
    "NumericalError",
    "UnsupportedOperationError",
    "InternalError",
    "NotFittedError",
    "__version__",
]
