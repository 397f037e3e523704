"""What models fitted over all series learn about each series: a level, slopes."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.catalogue import LINEAR_KINDS
from pipeline.core.columns import loaded_name, plain_name
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.categorical import OneHotEncoder
from pipeline.features.numeric import NumericTerms
from pipeline.features.rows import which_rows
from pipeline.spec import Spec


class SeriesTerms(OneHotEncoder):
    """For models over all series at once: the series one-hot encoded (a 0/1 column per
    series but the first, its own level), and, for named numeric drivers, that driver times
    each of those columns (its own slope). The first series in sorted order is the
    reference, as in a treatment coding.

    A series the training window did not hold gets the reference series' level and slopes,
    and a note says so.
    """

    def __init__(self, series_column: str, intercepts: bool = True, slopes=()) -> None:
        super().__init__(series_column, unseen="use_reference")
        self.intercepts = intercepts
        self.slopes = list(slopes)   # fitted NumericTerms, whose first-degree column is used
        # True when the levels are not columns but absorbed by the fit (set by the plan, for
        # more series than dense columns allow): the design then holds the slopes alone.
        self.absorbed_ = False
        # The word the terms are named by, when not the column's (set by the plan when a user's
        # categorical driver bears the series column's plain word, so no two terms share a name).
        self.word: str | None = None

    @property
    def name(self) -> str:
        return self.word or super().name

    @property
    def level_columns(self) -> bool:
        """Whether the design holds a 0/1 column per series (its level)."""
        return self.intercepts and not self.absorbed_

    def fit(self, frame: pd.DataFrame, y=None) -> SeriesTerms:
        self._fit_levels(frame)
        self.reference_ = self.known_levels_[0] if self.known_levels_ else None
        self.levels_ = self.known_levels_[1:]
        return self

    def transform(self, frame: pd.DataFrame) -> np.ndarray:
        if not (self.level_columns or self.slopes):
            return np.empty((len(frame), 0))
        dummies = super().transform(frame)
        blocks = [dummies] if self.level_columns else []
        # a 0/1 column times the driver's first-degree column: exact, no rounding at all
        blocks += [dummies * part.main_effect(frame) for part in self.slopes]
        return np.hstack(blocks) if blocks else np.empty((len(frame), 0))

    def get_feature_names_out(self) -> list[str]:
        levels = super().get_feature_names_out()
        return (levels if self.level_columns else []) + [
            f"{part.base_name} × {level}" for part in self.slopes for level in levels]

    def notes(self, frame: pd.DataFrame) -> list[str]:
        labels = frame[self.column].astype(str)
        unseen = ~labels.isin(self.known_levels_)
        if not unseen.any():
            return []
        names = sorted(labels[unseen].unique())
        shown = ", ".join(f"'{name}'" for name in names[:5]) + (
            f" and {len(names) - 5} more" if len(names) > 5 else "")
        return [f"series {shown} had no training rows: the models over all series give "
                f"{which_rows(frame, unseen.to_numpy())} the level and slopes of the first "
                f"series '{self.reference_}'"]

    def to_dict(self, parts=()) -> dict:
        """Return the settings and what was learned, as stored in a model file; each slope's
        driver as a reference to its place in ``parts``."""
        return encode_fields({
            "column": plain_name(self.column), "reference": self.reference, "group_below": self.group_below,
            "unseen": self.unseen, "intercepts": self.intercepts, "slopes": self.slopes,
            "grouped_": self.grouped_, "reference_": self.reference_,
            "known_levels_": self.known_levels_, "levels_": self.levels_,
            **({"absorbed_": True} if self.absorbed_ else {}),
            **({"word": self.word} if self.word else {})}, parts)

    @classmethod
    def from_dict(cls, data: dict, parts=(), version: int = FORMAT_VERSION) -> SeriesTerms:
        """Return the fitted terms ``to_dict`` stored (``parts``: the features read before, which
        the slopes refer to)."""
        with StoredFields(data, cls.__name__, parts, version) as fields:
            column = loaded_name(fields.text("column"))
            for key, fixed in (("reference", None), ("group_below", None), ("unseen", "use_reference")):
                if fields.raw(key) != fixed:
                    raise fields.bad(key, repr(fixed))
            terms = cls(column, fields.flag("intercepts"), fields.part_list("slopes", NumericTerms))
            terms.grouped_ = fields.texts("grouped_")
            terms.reference_ = fields.text("reference_", optional=True)
            terms.known_levels_ = fields.texts("known_levels_")
            terms.levels_ = fields.texts("levels_")
            terms.absorbed_ = fields.flag("absorbed_") if "absorbed_" in data else False
            terms.word = fields.text("word") if "word" in data else None
        terms._check_levels()
        return terms


def series_effects_of(spec: Spec):
    """Return the series effects the models over all series get, or None when they get none:
    with one series, with no such model, or when the series column is itself one-hot encoded."""
    pooled = [m for m in spec.models if m.kind in LINEAR_KINDS and not m.per_series]
    effects = spec.drivers.series_effects
    if not spec.input.series or not pooled:
        return None
    one_hot = {d.column for d in spec.drivers.categorical if d.encoding == "one_hot"}
    if len(spec.input.series) == 1 and spec.input.series[0] in one_hot:
        # The series' own levels are already columns; only the slopes are added.
        return effects.model_copy(update={"intercepts": False}) if effects.slopes else None
    return effects
