"""The catalogue: every model kind and every metric castline knows, each declared once.

The spec's allowed values, the command line's choices, the labels in the answer,
the report's and the summary's tables, the ledger's columns and model.json's tags
are all derived from here. Adding a model kind is one new module in
``pipeline/models`` and one ``ModelKind`` below; adding a metric is one function in
``pipeline/core/metrics.py`` and one ``Metric`` (and, since the ledger keeps a column
per metric, a ledger migration).

This module imports nothing heavy: a model's class and a metric's function are named
as ``module:attribute`` and imported when first used, so the command line can build
its choices without loading numpy or pandas.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field

PER_SERIES = "_per_series"    # the name of a model fitted to each series on its own: ols_per_series


def _load(reference: str):
    module, attribute = reference.split(":")
    return getattr(importlib.import_module(module), attribute)


@dataclass(frozen=True)
class ModelKind:
    """One kind of model a spec may ask for under ``models``."""

    name: str                 # the spec's kind, and the model column of every table
    label: str                # the name the answer's sentences use ({name}, {plural}, {season_lag}: the period's)
    family: str               # "reference" (a simple rule) or "linear" (fitted by least squares or a penalty)
    make: str                 # "module:Class" of the model; the class follows models.contract.Model
    capabilities: frozenset[str] = field(default_factory=frozenset)
    per_series: str | None = None   # "module:Class" of the same kind fitted to each series alone
    always: bool = False      # a simple reference fitted beside the mean baseline under time-ordered validation

    @property
    def baseline(self) -> bool:
        """Return whether this is a simple reference rule rather than a fitted model."""
        return self.family == "reference"

    def can(self, capability: str) -> bool:
        """Return whether the kind has a capability (see CAPABILITIES)."""
        return capability in self.capabilities or (capability == "per_series" and bool(self.per_series))

    def model_class(self, per_series: bool = False) -> type:
        """Return the class that implements this kind (fitted to each series alone, if asked)."""
        if per_series and not self.per_series:
            raise ValueError(f"model kind {self.name!r} is not fitted per series")
        return _load(self.per_series if per_series else self.make)


# What a kind may be able to do, beyond fit and predict.
CAPABILITIES = {
    "prediction_se": "a standard error for each prediction, hence analytic intervals",
    "intercept": "fits an intercept, or not (the spec's intercept: false)",
    "per_series": "may be fitted to each series on its own (per_series: true)",
    "penalised": "chooses a penalty; classical standard errors do not apply",
    "needs_time_order": "reads earlier months, so needs a time-ordered validation scheme",
}

MODEL_KINDS: tuple[ModelKind, ...] = (
    ModelKind("mean_baseline", "mean of the training {plural}", "reference", "pipeline.models.baselines:MeanBaseline"),
    ModelKind("calendar_month_mean", "calendar-{name} average", "reference",
              "pipeline.models.baselines:CalendarMonthMean", frozenset({"needs_time_order"}), always=True),
    ModelKind("trailing_mean", "trailing {season_lag}-{name} mean", "reference",
              "pipeline.models.baselines:TrailingMean", frozenset({"needs_time_order"}), always=True),
    ModelKind("last_value", "last value", "reference", "pipeline.models.baselines:LastValue",
              frozenset({"needs_time_order"}), always=True),
    ModelKind("seasonal_naive", "same {name} last year", "reference",
              "pipeline.models.baselines:SeasonalNaive", frozenset({"needs_time_order"}), always=True),
    ModelKind("drift", "drift", "reference", "pipeline.models.baselines:Drift",
              frozenset({"needs_time_order"})),
    ModelKind("ols", "OLS", "linear", "pipeline.models.ols:OLSModel",
              frozenset({"prediction_se", "intercept"}), per_series="pipeline.models.per_series:PerSeriesOLS"),
    ModelKind("ridge", "ridge", "linear", "pipeline.models.penalised:PenalisedModel",
              frozenset({"intercept", "penalised"})),
    ModelKind("lasso", "lasso", "linear", "pipeline.models.penalised:PenalisedModel",
              frozenset({"intercept", "penalised"})),
    ModelKind("elastic_net", "elastic net", "linear", "pipeline.models.penalised:PenalisedModel",
              frozenset({"intercept", "penalised"})),
    ModelKind("huber", "Huber", "linear", "pipeline.models.penalised:HuberModel", frozenset({"intercept"})),
)
MODELS = {kind.name: kind for kind in MODEL_KINDS}
BASELINE = "mean_baseline"    # the reference every model is measured against, always fitted first
BASELINE_KINDS = tuple(kind.name for kind in MODEL_KINDS if kind.baseline)
LINEAR_KINDS = tuple(kind.name for kind in MODEL_KINDS if kind.family == "linear")
PER_SERIES_KINDS = tuple(kind.name for kind in MODEL_KINDS if kind.can("per_series"))
# The simple references fitted beside the mean baseline whenever validation is time-ordered.
SIMPLE_REFERENCES = tuple(kind.name for kind in MODEL_KINDS if kind.always)


def model_kind(name: str) -> ModelKind:
    """Return the kind of a model name (``ols_per_series`` is of kind ``ols``)."""
    if name.endswith(PER_SERIES) and name[: -len(PER_SERIES)] in PER_SERIES_KINDS:
        return MODELS[name[: -len(PER_SERIES)]]
    return MODELS[name]


# The words of a monthly run, for a label asked without a period (a cadence.Cadence has the same
# fields; this module imports none, so that the command line loads no numpy to build its choices).
MONTH_WORDS = {"name": "month", "plural": "months", "season_lag": 12}


def period_words(cadence=None) -> dict:
    """Return the words a label template takes from a period's spacing (a Cadence, or None for months)."""
    if cadence is None:
        return MONTH_WORDS
    return {"name": cadence.name, "plural": cadence.plural, "season_lag": cadence.season_lag}


def model_label(name: str, cadence=None) -> str:
    """Return the name the answer uses for a model (``OLS per series``), in the words of the
    period's spacing (``same quarter last year``; months when none is given); unknown names as given."""
    try:
        kind = model_kind(name)
    except KeyError:
        return name
    label = kind.label.format(**period_words(cadence))
    return f"{label} per series" if name.endswith(PER_SERIES) else label


@dataclass(frozen=True)
class Metric:
    """One out-of-sample accuracy measure."""

    name: str           # the column name in every table, the ledger and select_by
    label: str          # how the answer writes it
    better: str         # "lower", "higher", or "nearer_zero" (bias)
    function: str       # "module:function" taking (actual, predicted, scale) and giving a float
    selectable: bool    # may pick the recommended model (select_by)
    needs_time_order: bool = False   # reads earlier months of a series (MASE's scale)

    def compute(self, actual, predicted, scale=None) -> float:
        """Return the metric of one set of predictions."""
        return _load(self.function)(actual, predicted, scale)


METRICS: tuple[Metric, ...] = (
    Metric("mae", "MAE", "lower", "pipeline.core.metrics:mae_score", True),
    Metric("rmse", "RMSE", "lower", "pipeline.core.metrics:rmse_score", True),
    Metric("mape", "MAPE", "lower", "pipeline.core.metrics:mape_score", True),
    Metric("smape", "sMAPE", "lower", "pipeline.core.metrics:smape_score", True),
    Metric("wape", "WAPE", "lower", "pipeline.core.metrics:wape_score", True),
    Metric("mase", "MASE", "lower", "pipeline.core.metrics:mase_score", True, needs_time_order=True),
    Metric("r2", "R²", "higher", "pipeline.core.metrics:r2_score", False),
    Metric("bias", "bias", "nearer_zero", "pipeline.core.metrics:bias_score", False),
)
METRIC_BY_NAME = {metric.name: metric for metric in METRICS}
SKILL = "skill_vs_mean"      # 1 − metric / metric of the mean baseline, in select_by: above 0 beats it
METRIC_NAMES = tuple(metric.name for metric in METRICS)
SELECT_METRICS = tuple(metric.name for metric in METRICS if metric.selectable)
LOWER_IS_BETTER = tuple(metric.name for metric in METRICS if metric.better == "lower")
HIGHER_IS_BETTER = (*(metric.name for metric in METRICS if metric.better == "higher"), SKILL)
# Every model's scores as the tables and the ledger hold them: rows scored, metrics, skill.
SCORES = ("n", *METRIC_NAMES, SKILL)


# The words the pages' tables head their columns with (a metric's own label otherwise); the
# column names stay in the CSV files, the ledger and the tables' data attributes.
COLUMN_LABELS = {
    "model": "model", "n": "forecasts scored", SKILL: "skill against the mean",
    "skill_vs_best_rule": "skill against the best rule", "p_value": "p", "p_holm": "p (Holm)",
    "against_mean": "against the mean", "interval_score_95": "interval score, 95%",
    "interval_score": "interval score", "method": "interval", "coverage": "held",
    "std_error": "standard error", "low_95": "95% from", "high_95": "95% to",
    "standard_errors": "standard errors", "cooks_distance": "Cook's distance",
    "above_4_over_n": "above 4/n", "baseline_mae": "MAE of the mean",
    "run_id": "run id",
    "last_period": "last actual month", "mae_change": "MAE change", "rmse_change": "RMSE change",
    f"{SKILL}_change": "skill change", "statistic": "test statistic",
    "vif": "VIF (generalised for a group of terms)", "vif_adjusted": "GVIF^(1/(2·df))",
    "df": "degrees of freedom",
}


def column_label(name: str, cadence=None) -> str:
    """Return the words a table heads a column with: a metric's label (MAE, R²), else the
    column's words (``skill_vs_mean`` → "skill against the mean"), else a model's label for a
    table with a column per model (``seasonal_naive`` → "same month last year"), else the name
    as given. The words that name a period follow ``cadence`` (months when none is given)."""
    if name in METRIC_BY_NAME:
        return METRIC_BY_NAME[name].label
    if name == "last_period" and cadence is not None:
        return f"last actual {cadence.name}"
    if name == "months_ahead" and cadence is not None:   # the ledger's column, whatever the spacing
        return f"{cadence.plural}_ahead"
    return COLUMN_LABELS.get(name) or (model_label(name, cadence) if isinstance(name, str) else name)
