# Type stub of the compiled module shiftweight._native (crates/shiftweight-py/src/*.rs).
# Checked against the built module by `make test-python` (python -m mypy.stubtest).
# Matrices are C-contiguous float64 (the Python layer converts inputs first); results that are
# documents are JSON strings. Results that are plain dicts of a fixed layout are TypedDicts, so
# type checkers see their keys; those exist only here (underscore names, as in typeshed), not at
# runtime, where the values are ordinary dicts.

from typing import Any, Dict, List, Literal, Optional, Tuple, TypedDict, final

import numpy as np
import numpy.typing as npt

_F64 = npt.NDArray[np.float64]

__version__: str

class ShiftweightError(ValueError): ...
class ModelFileError(ShiftweightError): ...
class UnsupportedOperationError(ShiftweightError): ...
class NumericalError(RuntimeError): ...
class InternalError(RuntimeError): ...

def set_threads(n: int) -> None: ...
def get_threads() -> int: ...

# ratio.rs
class _SelectionRequired(TypedDict):
    criterion: str  # name of the selection criterion (lower score is better)
    chosen: Dict[str, float]  # the chosen hyperparameters, including those given by the user
    # One row per candidate tried, in order: its hyperparameters by name, plus "score" (and for the
    # automatic choice, "std_error", "pareto_k" when it could be estimated, and "excluded" = 1.0
    # for candidates the heavy-tail guard kept from being chosen).
    table: List[Dict[str, float]]

class _Selection(_SelectionRequired, total=False):
    labels: List[str]  # only when candidates are named estimators (automatic choice): one per table row
    candidate: str  # only then: the name of the chosen candidate ("uniform" for no correction)

class _FitMeta(TypedDict):
    n_source: int
    n_target: int
    n_features: int
    seed: int
    library_version: str
    feature_names: Optional[List[str]]

@final
class RatioModel:
    def ratio(self, x: _F64) -> _F64: ...
    def raw_ratio(self, x: _F64) -> _F64: ...
    @property
    def cap(self) -> Optional[Tuple[float, float, float]]: ...
    def decision_summary(self) -> Optional[str]: ...
    @property
    def source_weights(self) -> _F64: ...
    @property
    def kind(self) -> str: ...
    @property
    def n_features(self) -> int: ...
    @property
    def feature_names(self) -> Optional[List[str]]: ...
    @property
    def warnings(self) -> List[str]: ...
    @property
    def selection(self) -> _Selection: ...
    @property
    def meta(self) -> _FitMeta: ...
    def form_json(self) -> str: ...
    def to_json(self) -> str: ...
    @staticmethod
    def from_json(text: str) -> RatioModel: ...
    def __reduce__(self) -> Tuple[Any, Tuple[str]]: ...

def fit_ratio(
    source: _F64,
    target: _F64,
    kind: str,
    params: Dict[str, Any],
    feature_names: Optional[List[str]] = None,
) -> RatioModel: ...
def estimator_defaults() -> Dict[str, Any]: ...
def fit_auto(
    source: _F64,
    target: _F64,
    candidates: Optional[List[Tuple[str, str, Dict[str, Any]]]],
    folds: int,
    seed: int,
    se_margin: float,
    score: str,
    prefer_stable: bool,
    tail_k: float,
    max_rows: int,
    feature_names: Optional[List[str]] = None,
) -> RatioModel: ...
def weights_from_probabilities(p_target: _F64, n_source: int, n_target: int, clip: float) -> Tuple[_F64, int]: ...

# learn.rs
@final
class LinearModel:
    @property
    def coef(self) -> _F64: ...
    @property
    def intercept(self) -> float: ...
    @property
    def kind(self) -> str: ...
    @property
    def l2(self) -> float: ...
    @property
    def n_iter(self) -> int: ...
    @property
    def feature_names(self) -> Optional[List[str]]: ...
    @property
    def schema(self) -> Optional[List[Tuple[str, str]]]: ...
    @property
    def warnings(self) -> List[str]: ...
    def decision_function(self, x: _F64) -> _F64: ...
    def predict(self, x: _F64) -> _F64: ...
    def predict_proba(self, x: _F64) -> _F64: ...
    def decision_function_table(self, x: Table) -> Tuple[_F64, List[Tuple[str, Optional[str], int, int]]]: ...
    def predict_table(self, x: Table) -> Tuple[_F64, List[Tuple[str, Optional[str], int, int]]]: ...
    def predict_proba_table(self, x: Table) -> Tuple[_F64, List[Tuple[str, Optional[str], int, int]]]: ...
    def to_json(self) -> str: ...
    @staticmethod
    def from_json(text: str) -> LinearModel: ...
    def __reduce__(self) -> Tuple[Any, Tuple[str]]: ...

def fit_weighted_logistic(
    x: _F64, y: _F64, sample_weight: Optional[_F64], l2: float, max_iter: int
) -> LinearModel: ...
def fit_weighted_ridge(x: _F64, y: _F64, sample_weight: Optional[_F64], l2: float) -> LinearModel: ...
def fit_weighted_logistic_table(
    x: Table, y: _F64, sample_weight: Optional[_F64], l2: float, max_iter: int
) -> LinearModel: ...
def fit_weighted_ridge_table(x: Table, y: _F64, sample_weight: Optional[_F64], l2: float) -> LinearModel: ...

# demo.rs
class _DemoData(TypedDict):
    feature_names: List[str]
    source: _F64  # n_source x 6
    y_source: _F64
    target: _F64  # n_target x 6
    y_target: _F64
    # typed tables: (name, float64 values with NaN) or (name, (levels, int64 codes, -1 = missing))
    source_columns: List[Tuple[str, Any]]
    target_columns: List[Tuple[str, Any]]

def demo_electricity(n_source: int = 2000, n_target: int = 1000, seed: int = 0) -> _DemoData: ...

# data.rs
def kfold_assignment(n: int, k: int, seed: int) -> npt.NDArray[np.int64]: ...
def validate_weights(w: _F64, n: int, name: str) -> None: ...

# metrics.rs
class _WeightedMean(TypedDict):
    estimate: float
    std_error: float
    ess: float  # Kish effective sample size
    n: int
    total_weight: float

class _CrossValidated(TypedDict):
    estimate: float
    std_error: float
    unweighted_estimate: float
    unweighted_std_error: float
    per_fold: List[_WeightedMean]
    per_fold_unweighted: List[float]

_Verdict = Literal["favours_weighting", "favours_no_weighting", "no_clear_difference"]

class _WeightingComparison(TypedDict):
    weighted: _CrossValidated
    unweighted: _CrossValidated
    difference: float
    difference_std_error: float
    verdict: _Verdict

class _MetricInterval(_WeightedMean):
    lower: float
    upper: float
    confidence: float

def metric_row_values(metric: str, y_true: _F64, y_pred: _F64) -> _F64: ...
def metric_properties(metric: str) -> Tuple[bool, bool]: ...
def cross_validated(
    values: _F64, weights: _F64, fold: npt.NDArray[np.int64], n_folds: int
) -> _CrossValidated: ...
def fold_average(per_fold: List[float]) -> Tuple[float, float]: ...
def compare_weighting(
    with_weights: _F64,
    without_weights: _F64,
    weights: _F64,
    fold: npt.NDArray[np.int64],
    n_folds: int,
    greater_is_better: bool,
    z: float,
) -> _WeightingComparison: ...
def compare_weighting_per_fold(
    with_weights: List[float], without_weights: List[float], greater_is_better: bool, z: float
) -> Tuple[float, float, _Verdict]: ...
def metric_interval(
    values: _F64, weights: Optional[_F64], confidence: float, method: str, n_boot: int, seed: int
) -> _MetricInterval: ...

# conformal.rs
def conformal_intervals(
    y_cal: _F64, pred_cal: _F64, cal_weights: Optional[_F64], pred: _F64, weights: Optional[_F64], alpha: float
) -> Tuple[_F64, _F64, _F64, int]: ...
def conformal_sets(
    proba_cal: _F64, label_cal: _F64, cal_weights: Optional[_F64], proba: _F64, weights: Optional[_F64], alpha: float
) -> Tuple[npt.NDArray[np.bool_], _F64, int]: ...

# detect.rs
def shift_test_classifier(
    source: _F64, target: _F64, permutations: int, seed: int, folds: int, l2: float, max_permutation_rows: int
) -> str: ...
def shift_test_mmd(
    source: _F64,
    target: _F64,
    permutations: int,
    seed: int,
    sigma: Optional[float],
    max_kernel_rows: int,
    block_size: Optional[int],
) -> str: ...
def feature_shift(
    source: _F64,
    target: _F64,
    feature_names: Optional[List[str]],
    max_categories: int,
    folds: int,
    l2: float,
    repeats: int,
    max_importance_rows: int,
    seed: int,
) -> str: ...
def auc_summary(pos: _F64, neg: _F64) -> Tuple[float, float, float, float, float]: ...
def mann_whitney_greater(pos: _F64, neg: _F64) -> Tuple[float, float]: ...
def ks_two_sample(a: _F64, b: _F64, mode: str) -> Tuple[float, float, str]: ...
def kolmogorov_sf(n: int, x: float) -> float: ...
def chi_square_two_rows(source_counts: _F64, target_counts: _F64) -> Tuple[float, float, int]: ...
def benjamini_hochberg(p: _F64) -> List[float]: ...

# weights.rs
def stabilize(
    w: _F64,
    lower: Optional[float],
    upper: Optional[float],
    upper_quantile: Optional[float],
    truncate: bool,
    power: float,
    smooth: bool,
    normalize: bool,
) -> Tuple[_F64, str]: ...

# diagnostics.rs
def effective_sample_size(w: _F64) -> float: ...
def ess_words(ess: float, n: int, rows: str) -> str: ...
def pareto_k(w: _F64) -> str: ...
def diagnose(w: _F64, codes: Optional[npt.NDArray[np.int64]] = None, names: Optional[List[str]] = None) -> str: ...
def diagnosis_from_json(text: str) -> str: ...
def clip_tradeoff(w: _F64, quantiles: Optional[List[float]] = None) -> str: ...
def clip_for_ess(w: _F64, ess_fraction: float) -> str: ...
def check_overlap(target_ratios: _F64, limit: float, tolerance: float) -> str: ...
def check_overlap_probabilities(
    probabilities: _F64, n_source: int, n_target: int, limit: float, tolerance: float
) -> str: ...

# Typed tables (conversion from DataFrames happens in shiftweight._tables).
@final
class Table:
    def __new__(cls, columns: List[Tuple[str, str, Any, Optional[str]]]) -> Table: ...
    @property
    def names(self) -> List[str]: ...
    @property
    def kinds(self) -> List[str]: ...
    @property
    def rows(self) -> int: ...

def encode_pair(source: Table, target: Table) -> Tuple[_F64, _F64, str, List[str], List[str]]: ...
def attach_encoding(model: RatioModel, encoding: str, warnings: List[str]) -> RatioModel: ...
def ratio_table(model: RatioModel, x: Table) -> Tuple[_F64, List[Tuple[str, Optional[str], int, int]]]: ...
def model_schema(model: RatioModel) -> Optional[List[Tuple[str, str]]]: ...
def support_gaps(
    source: Table, target: Table
) -> Tuple[List[Tuple[str, Optional[str], int, int]], int, List[str]]: ...
def feature_shift_table(
    source: Table,
    target: Table,
    max_categories: int,
    folds: int,
    l2: float,
    repeats: int,
    max_importance_rows: int,
    seed: int,
) -> str: ...
def check_overlap_tables(
    target_ratios: _F64, limit: float, tolerance: float, source: Table, target: Table
) -> str: ...

# label.rs
TELLING_APART: str
LABEL_SHIFT_CAUTION: str

def label_shift_fit(
    source_probabilities: _F64,
    source_labels: _F64,
    target_probabilities: _F64,
    method: str,
    level: float,
    bootstrap: int,
    seed: int,
    max_iter: int,
    class_names: Optional[List[str]],
) -> str: ...
def label_shift_adjust(document: str, probabilities: _F64) -> _F64: ...
def class_mix_test(
    source_probabilities: _F64, target_probabilities: _F64, permutations: int, min_expected: float, seed: int
) -> str: ...
def class_matched_rows(labels: _F64, proportions: _F64, seed: int) -> npt.NDArray[np.int64]: ...
def stratified_kfold_assignment(labels: _F64, k: int, seed: int) -> npt.NDArray[np.int64]: ...
def label_shift_from_json(text: str) -> str: ...
def class_mix_test_from_json(text: str) -> str: ...

# report.rs
def write_report(
    source: _F64,
    target: _F64,
    feature_names: List[str],
    path: str,
    model_json: Optional[str],
    weights: Optional[_F64],
    seed: int,
    test: str,
    permutations: int,
    level: float,
    json_path: Optional[str],
    label_shift_json: Optional[str] = None,
    mix_test_json: Optional[str] = None,
) -> str: ...
def write_label_shift_report(
    label_shift_json: str, mix_test_json: Optional[str], path: str, json_path: Optional[str]
) -> str: ...
def write_report_table(
    source: Table,
    target: Table,
    path: str,
    model_json: Optional[str],
    weights: Optional[_F64],
    seed: int,
    test: str,
    permutations: int,
    level: float,
    json_path: Optional[str],
    label_shift_json: Optional[str] = None,
    mix_test_json: Optional[str] = None,
) -> str: ...
