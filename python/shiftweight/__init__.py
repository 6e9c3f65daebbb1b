"""shiftweight: covariate-shift tools for models trained on one population and used on another.

Detect whether deployment inputs differ from training inputs and where, estimate importance
weights w(x) = p_target(x) / p_source(x) with data-chosen hyperparameters, check and stabilise
them, retrain with them, and estimate target performance before target labels exist. For label
shift (the class mix changes, the look of each class does not): estimate the target class mix
from a classifier's probabilities and correct for it (``LabelShift``, ``class_mix_test``).

Cautions: weighting corrects covariate shift only (not label or concept shift); it fails where
the source does not cover the target; validate on labelled target data before relying on it; and
defer to the regulations and review processes of your domain. Load pickles only from trusted
sources; JSON model files are the safe exchange format.
"""

from ._conformal import ConformalIntervals, ConformalSets, conformal_intervals, conformal_sets
from ._demo import demo_data
from ._detect import FeatureShiftTable, ShiftTestResult, feature_shift, shift_test
from ._evaluate import (
    CrossValidatedRisk,
    MetricEstimate,
    WeightingComparison,
    compare_weighting,
    iw_cross_validate,
    weighted_metric,
)
from ._label import (
    ClassMixTestResult,
    LabelShift,
    LabelShiftResult,
    class_matched_rows,
    class_mix_test,
    out_of_fold_proba,
)
from ._learn import WeightedLogistic, WeightedRidge, linear_model_from_json
from ._native import (
    InternalError,
    ModelFileError,
    NumericalError,
    ShiftweightError,
    UnsupportedOperationError,
    __version__,
    get_threads,
    set_threads,
)
from ._ratio import (
    AutoRatio,
    ClassifierRatio,
    KernelMeanMatching,
    KLRatio,
    LeastSquaresRatio,
    from_json,
    ratio_from_probabilities,
)
from ._report import write_report
from ._validation import NotFittedError
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
    "KLRatio",
    "KernelMeanMatching",
    "ClassifierRatio",
    "AutoRatio",
    "ratio_from_probabilities",
    "WeightedLogistic",
    "WeightedRidge",
    "linear_model_from_json",
    "iw_cross_validate",
    "compare_weighting",
    "weighted_metric",
    "conformal_intervals",
    "conformal_sets",
    "CrossValidatedRisk",
    "WeightingComparison",
    "MetricEstimate",
    "ConformalIntervals",
    "ConformalSets",
    "from_json",
    "shift_test",
    "write_report",
    "feature_shift",
    "ShiftTestResult",
    "FeatureShiftTable",
    "LabelShift",
    "LabelShiftResult",
    "class_mix_test",
    "ClassMixTestResult",
    "class_matched_rows",
    "out_of_fold_proba",
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
    "get_threads",
    "ShiftweightError",
    "ModelFileError",
    "NumericalError",
    "UnsupportedOperationError",
    "InternalError",
    "NotFittedError",
    "__version__",
    "plot",
]


def __getattr__(name: str):
    # `sw.plot` is imported on first use, so importing shiftweight never imports matplotlib.
    if name == "plot":
        import importlib

        return importlib.import_module(".plot", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
