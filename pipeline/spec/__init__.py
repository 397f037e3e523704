"""The forecast spec: its typed sections (schema), the loader that reads it from
YAML (loader) and the rules across keys (rules).

Only this package reads the YAML; the rest of castline works from the typed ``Spec``.
"""

from pipeline.spec.keys import KeyPath, format_key_path
from pipeline.spec.loader import load_spec
from pipeline.spec.rules import column_roles, text_columns
from pipeline.spec.schema import (
    TIME_ORDERED,
    CalendarFeatures,
    CategoricalDriver,
    ColumnRule,
    ComputeSection,
    CsvOptions,
    DriverChange,
    DriversSection,
    GroupedKFoldValidation,
    HoldoutValidation,
    InputSection,
    KFoldValidation,
    LaggedColumn,
    ModelChoice,
    NumericDriver,
    OutputSection,
    RollingOriginValidation,
    Scenario,
    SeriesEffects,
    Spec,
    StrictModel,
)

__all__ = [
    "TIME_ORDERED", "CalendarFeatures",
    "CategoricalDriver", "ColumnRule", "ComputeSection", "CsvOptions", "DriverChange", "DriversSection",
    "GroupedKFoldValidation", "HoldoutValidation", "InputSection", "KFoldValidation", "KeyPath",
    "LaggedColumn", "ModelChoice", "NumericDriver", "OutputSection", "RollingOriginValidation",
    "Scenario", "SeriesEffects", "Spec", "StrictModel", "column_roles", "format_key_path", "load_spec",
    "text_columns",
]
