"""The full report of a source/target pair as one self-contained HTML file.

``write_report`` calls the same Rust code as the command line's ``shiftweight report``: for the
same inputs and seed both files show the same numbers. The page answers a reviewer's questions in
order: is there a shift (the test with its statistic named and its p-value explained), which
features moved and how (source and target distributions side by side), how the weights were
estimated (every candidate by name, the chosen one marked), how healthy they are (diagnostics with
thresholds), what capping them costs, and the cautions. It loads nothing from elsewhere and prints
cleanly. See docs/report.md.
"""

from __future__ import annotations

import os
from typing import Any, Optional

from . import _native
from ._detect import _pair, _tables
from ._validation import as_count, as_seed, as_vector

__all__ = ["write_report"]


def write_report(
    source: Any,
    target: Any,
    path: str | os.PathLike[str],
    estimator: Any = None,
    weights: Any = None,
    *,
    seed: int = 0,
    test: str = "classifier",
    permutations: int = 200,
    level: float = 0.05,
    json_path: Optional[str | os.PathLike[str]] = None,
    label_shift: Any = None,
    mix_test: Any = None,
) -> str:
    """Writes the full HTML report of ``source`` and ``target`` to ``path``; returns its summary.

    Parameters
    ----------
    source, target : 2-D arrays, or data frames (pandas, polars, pyarrow) with the same columns;
        text and categorical columns and missing values take the typed path, as on the command
        line (each column tested by its type and drawn as it is in the data).
    path : where to write the HTML file (replaced atomically: written to a temporary file in the
        same folder, then renamed).
    estimator : a fitted ratio estimator (e.g. ``sw.AutoRatio().fit(source, target)``) whose
        weights of the source rows are reported. Default: the automatic choice is fitted with
        ``seed``, as the command line does without ``--model``.
    weights : instead of an estimator, one weight per source row (e.g. already stabilised).
    seed : seed of every random step (folds, permutations, the automatic choice).
    test : ``"classifier"`` (out-of-fold AUC with its interval) or ``"mmd"`` (MMD^2).
    permutations : permutations of the p-value; its resolution is 1 / (permutations + 1).
    level : significance level of the verdict, in (0, 1).
    json_path : also write the JSON report there.
    label_shift : a label-shift estimate (``sw.LabelShift().fit(...)`` or its ``result_``) to add
        as a section: estimated class shares with intervals, method, class weights, cautions.
    mix_test : with ``label_shift``, the predicted-class mix test (``sw.class_mix_test``) shown in
        that section.

    Returns
    -------
    The summary paragraph of the report (verdict, chosen weighting, reliability) in plain words.

    Examples
    --------
    >>> import shiftweight as sw, tempfile, os
    >>> d = sw.demo_data(300, 150, seed=1)
    >>> out = os.path.join(tempfile.mkdtemp(), "report.html")
    >>> summary = sw.write_report(d["source"], d["target"], out, permutations=19)
    >>> summary.startswith("Shift found")
    True
    """
    if estimator is not None and weights is not None:
        raise _native.ShiftweightError("give either `estimator` or `weights`, not both")
    tables = _tables(source, target, None, None)
    model_json: Optional[str] = None
    if estimator is not None:
        if not hasattr(estimator, "to_json"):
            raise _native.ShiftweightError(
                f"`estimator` must be a fitted shiftweight ratio estimator, got {type(estimator).__name__}"
            )
        model_json = estimator.to_json()
    n_source = tables[0].rows if tables is not None else None
    s = t = None
    names: Any = None
    if tables is None:
        s, t, names = _pair(source, target)
        n_source = s.shape[0]
    w = None if weights is None else as_vector(weights, "weights", n_source)
    if test not in ("classifier", "mmd"):
        raise _native.ShiftweightError(f'`test` must be "classifier" or "mmd", got {test!r}')
    lvl = float(level)
    if not 0.0 < lvl < 1.0:
        raise _native.ShiftweightError(f"`level` must be in (0, 1), got {level!r}")
    json_out = None if json_path is None else os.fspath(json_path)
    label_json, mix_json = _label_documents(label_shift, mix_test)
    # Everything after the two inputs (and the matrix path's feature names) is shared.
    rest = (
        os.fspath(path),
        model_json,
        w,
        as_seed(seed),
        test,
        as_count(permutations, "permutations"),
        lvl,
        json_out,
        label_json,
        mix_json,
    )
    if tables is not None:
        # Typed columns (text levels, gaps): the same call as the command line's `report`.
        return str(_native.write_report_table(tables[0], tables[1], *rest))
    assert s is not None and t is not None
    feature_names = list(names) if names else [f"x{j}" for j in range(s.shape[1])]
    return str(_native.write_report(s, t, feature_names, *rest))


def _label_documents(label_shift: Any, mix_test: Any) -> tuple[Optional[str], Optional[str]]:
    """The JSON documents of the optional label-shift section (checked by type)."""
    from ._label import ClassMixTestResult, LabelShift, LabelShiftResult

    if label_shift is None:
        if mix_test is not None:
            raise _native.ShiftweightError("`mix_test` is shown in the label-shift section: pass `label_shift` too")
        return None, None
    result = label_shift
    if isinstance(label_shift, LabelShift) and hasattr(label_shift, "result_"):
        result = label_shift.result_
    if not isinstance(result, LabelShiftResult):
        raise _native.ShiftweightError(
            f"`label_shift` must be a fitted sw.LabelShift or a LabelShiftResult, got {type(label_shift).__name__}"
        )
    if mix_test is not None and not isinstance(mix_test, ClassMixTestResult):
        raise _native.ShiftweightError(
            f"`mix_test` must be a ClassMixTestResult (from sw.class_mix_test), got {type(mix_test).__name__}"
        )
    return result.to_json(), None if mix_test is None else mix_test.to_json()
