"""The run ledger over six monthly reruns of the demo: history, compare and realised accuracy.

A plumbing test. The demo data is invented, so no figure here is a reference value:
every expected figure is computed in this file, directly from the run folders' files
(forecast.csv, predictions.csv, coefficients.csv, metrics.json, spec.yaml) and the data
each rerun was given, and never read back from the ledger.

The replay: data_samples/make_compost_demo.py's make_demo() cut month by month. Rerun 0
holds actuals to 2026-05, each later rerun one month more (to 2026-10), each with the
next three months' drivers as the months to forecast. From rerun 3 on, North's 2026-06
actual is revised up by 250 (a month rerun 0 forecast); in rerun 5, West's 2026-10 actual
comes in at 1.6 times the demo's, and the spec's description and significance level
change. Holdout validation and OLS (beside the simple rules a holdout always compares), to
keep the file fast.
"""

from __future__ import annotations

import hashlib
import importlib.util
import io
import json
import shutil
import sqlite3
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import DEMO_SPEC, ROOT

import pipeline
from pipeline import cli
from pipeline.record import ledger
from pipeline.review import history

FIRST_CUT = pd.Period("2026-05", "M")
RERUNS = 6
REVISED_MONTH, REVISED_SERIES, REVISION, REVISED_FROM = pd.Period("2026-06", "M"), "North", 250, 3
SHOCK_MONTH, SHOCK_SERIES, SHOCK = pd.Period("2026-10", "M"), "West", 1.6
CHANGED_SPEC_KEYS = {"description": "Rerun with a looser test.", "significance_level": 0.1}
# The models of each rerun: the mean of the training months, ols, and the simple rules a holdout always adds.
MODELS = ["mean_baseline", "ols", "calendar_month_mean", "trailing_mean", "last_value", "seasonal_naive"]


def make_demo() -> pd.DataFrame:
    path = ROOT / "data_samples" / "make_compost_demo.py"
    loader = importlib.util.spec_from_file_location("make_compost_demo", path)
    module = importlib.util.module_from_spec(loader)
    loader.loader.exec_module(module)
    return module.make_demo()


def months_of(frame: pd.DataFrame) -> pd.PeriodIndex:
    return pd.PeriodIndex(pd.to_datetime(frame["month"]), freq="M")


def rerun_data(demo: pd.DataFrame, rerun: int) -> pd.DataFrame:
    """Return the data rerun `rerun` is given: actuals to its month, three months to forecast."""
    cut = FIRST_CUT + rerun
    frame = demo[months_of(demo) <= cut + 3].copy().reset_index(drop=True)
    months = months_of(frame)
    frame.loc[months > cut, "bags_sold"] = pd.NA
    if rerun >= REVISED_FROM:
        frame.loc[(months == REVISED_MONTH) & (frame["region"] == REVISED_SERIES), "bags_sold"] += REVISION
    if rerun == RERUNS - 1:
        shocked = (months == SHOCK_MONTH) & (frame["region"] == SHOCK_SERIES)
        frame.loc[shocked, "bags_sold"] = (frame.loc[shocked, "bags_sold"] * SHOCK).round().astype("Int64")
    return frame


@dataclass
class Rerun:
    number: int
    data: pd.DataFrame
    data_sha256: str
    result: object

    @property
    def folder(self) -> Path:
        return self.result.folder.path

    @property
    def run_id(self) -> str:
        return self.result.folder.run_id

    def table(self, name: str) -> pd.DataFrame:
        return pd.read_csv(self.folder / name, keep_default_na=True)

    @property
    def metrics(self) -> dict:
        return json.loads((self.folder / "metrics.json").read_text(encoding="utf-8"))


@dataclass
class Replay:
    spec: Path
    ledger: Path
    reruns: list[Rerun]


@pytest.fixture(scope="module")
def replay(tmp_path_factory) -> Replay:
    base = tmp_path_factory.mktemp("replay")
    demo = make_demo()
    template = yaml.safe_load(DEMO_SPEC.read_text(encoding="utf-8"))
    template["input"]["file"] = "data.csv"
    template["input"]["as_of"] = "2027-01-31"          # no test depends on today's date
    template["output"]["folder"] = "runs"
    spec_path = base / "spec.yaml"
    reruns = []
    for number in range(RERUNS):
        spec = dict(template, **(CHANGED_SPEC_KEYS if number == RERUNS - 1 else {}))
        spec_path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
        data = rerun_data(demo, number)
        data.to_csv(base / "data.csv", index=False)
        sha = hashlib.sha256((base / "data.csv").read_bytes()).hexdigest()
        reruns.append(Rerun(number, data, sha, pipeline.run(spec_path)))
    return Replay(spec=spec_path, ledger=base / "runs" / "ledger.sqlite", reruns=reruns)


# ---------------------------------------------------------------- computed directly

def actuals(data: pd.DataFrame) -> pd.DataFrame:
    """Return the data's actuals as period, series, actual."""
    known = data[data["bags_sold"].notna()]
    return pd.DataFrame({"period": months_of(known).astype(str), "series": known["region"].to_numpy(),
                         "actual": known["bags_sold"].to_numpy(float)})


def backtest_scores(rerun: Rerun, by: list[str]) -> pd.DataFrame:
    """Return MAE and RMSE from the run folder's predictions.csv, and skill = 1 − MAE/MAE of
    the mean of the training months (the README's definition)."""
    predictions = rerun.table("predictions.csv")
    errors = predictions["prediction"] - predictions["actual"]
    scored = predictions.assign(abs_error=errors.abs(), sq_error=errors ** 2)
    table = scored.groupby(["model", *by]).agg(mae=("abs_error", "mean"), sq=("sq_error", "mean"))
    table["rmse"] = np.sqrt(table.pop("sq"))
    table = table.reset_index()
    baseline = table[table["model"] == "mean_baseline"].set_index(by)["mae"] if by else \
        table.loc[table["model"] == "mean_baseline", "mae"].iloc[0]
    reference = table.set_index(by).index.map(baseline) if by else baseline
    table["skill_vs_mean"] = 1 - table["mae"] / np.asarray(reference, float)
    return table


def stated_method(rerun: Rerun, model: str) -> str:
    """Return the interval method the summary stated for a model: of the methods its forecasts
    have, the one whose backtest 95% coverage came closest to 95% (the summary's rule), else the
    first it has."""
    forecast = rerun.table("forecast.csv")
    own = forecast[forecast["model"] == model]
    available = [m for m in ("analytic", "empirical") if own[f"{m}_low_95"].notna().any()]
    coverage = [row for row in rerun.metrics["interval_coverage"] if row["model"] == model
                and row["level"] == 0.95 and row["coverage"] is not None and row["method"] in available]
    if coverage:
        return min(coverage, key=lambda row: abs(row["coverage"] - 0.95))["method"]
    return available[0]


def scored_forecasts(rerun: Rerun, data: pd.DataFrame) -> pd.DataFrame:
    """Return the rerun's forecast.csv rows that have an actual in `data`, scored directly."""
    forecast = rerun.table("forecast.csv").astype({"period": str})
    scored = forecast.merge(actuals(data), on=["period", "series"], how="inner")
    scored["error"] = scored["forecast"] - scored["actual"]
    for model, rows in scored.groupby("model"):
        method = stated_method(rerun, model)
        for level in ("80", "95"):
            inside = (rows["actual"] >= rows[f"{method}_low_{level}"]) & \
                     (rows["actual"] <= rows[f"{method}_high_{level}"])
            scored.loc[rows.index, f"inside_{level}"] = inside.astype(float)
    scored["outside_backtest_95"] = (scored["actual"] < scored["empirical_low_95"]) | \
                                    (scored["actual"] > scored["empirical_high_95"])
    return scored


def history_json(replay: Replay, capsys, *extra: str) -> dict:
    capsys.readouterr()
    assert cli.main(["history", str(replay.spec), "--format", "json", *extra]) == 0
    return json.loads(capsys.readouterr().out)


def compare_json(replay: Replay, capsys, first: str, second: str) -> dict:
    capsys.readouterr()
    assert cli.main(["compare", first, second, "--ledger", str(replay.ledger), "--format", "json"]) == 0
    return json.loads(capsys.readouterr().out)


# ---------------------------------------------------------------- every run lands whole

def test_each_rerun_is_recorded_whole(replay):
    with closing(sqlite3.connect(replay.ledger)) as conn:
        runs = pd.read_sql_query("SELECT * FROM runs ORDER BY created", conn)
        assert conn.execute("SELECT version FROM schema_version").fetchall() == [(ledger.SCHEMA_VERSION,)]
        for rerun, run in zip(replay.reruns, runs.itertuples()):
            assert run.run_id == rerun.run_id and run.state == "placed"
            assert run.folder == str(rerun.folder)
            assert run.input_sha256 == rerun.data_sha256
            resolved = yaml.safe_load((rerun.folder / "spec.yaml").read_text(encoding="utf-8"))
            canonical = json.dumps(resolved, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
            assert run.spec_hash == hashlib.sha256(canonical.encode("utf-8")).hexdigest()
            assert run.last_period == str(FIRST_CUT + rerun.number)
            assert run.history_rows == int(rerun.data["bags_sold"].notna().sum())
            recorded = pd.read_sql_query("SELECT * FROM forecasts WHERE run_id = ? ORDER BY model, period, "
                                         "series", conn, params=(run.run_id,))
            written = rerun.table("forecast.csv").astype({"period": str}).sort_values(
                ["model", "period", "series"]).reset_index(drop=True)
            assert len(recorded) == len(written) == len(MODELS) * 4 * 3
            for column in ["forecast", *ledger.INTERVAL_COLUMNS]:
                np.testing.assert_allclose(recorded[column].astype(float), written[column], rtol=1e-12)
            assert set(recorded["model"]) == set(MODELS)
            for model, own in recorded.groupby("model"):
                assert set(own["interval_method"]) == {stated_method(rerun, model)}, model
            periods = pd.read_sql_query("SELECT * FROM periods WHERE run_id = ?", conn, params=(run.run_id,))
            assert len(periods) == months_of(rerun.data).nunique()
    assert len(runs) == RERUNS
    assert runs["spec_hash"].nunique() == 2, "only the last rerun changed the spec"


# ---------------------------------------------------------------- history

def test_history_gives_each_runs_metrics_and_the_change_from_the_run_before(replay, capsys):
    rows = pd.DataFrame(history_json(replay, capsys)["metrics"])
    assert list(rows["run_id"].unique()) == [r.run_id for r in replay.reruns]
    previous = None
    for rerun in replay.reruns:
        expected = backtest_scores(rerun, []).set_index("model")
        shown = rows[rows["run_id"] == rerun.run_id].set_index("model")
        assert list(shown.index) == [MODELS[0], *sorted(MODELS[1:])]   # the baseline first, then by name
        for metric in ("mae", "rmse", "skill_vs_mean"):
            np.testing.assert_allclose(shown[metric], expected.loc[shown.index, metric], rtol=1e-9, atol=1e-12)
            if previous is None:
                assert shown[f"{metric}_change"].isna().all()
            else:
                np.testing.assert_allclose(shown[f"{metric}_change"],
                                           expected.loc[shown.index, metric] - previous.loc[shown.index, metric],
                                           rtol=1e-7, atol=1e-9)
        # the lowest MAE in predictions.csv (every model here has a lower one than the mean's)
        lowest = expected["mae"].idxmin()
        assert expected.loc[lowest, "mae"] < expected.loc["mean_baseline", "mae"]
        assert shown["recommended"].to_dict() == {model: model == lowest for model in MODELS}
        previous = expected


def test_history_scores_every_forecast_against_the_latest_actuals(replay, capsys):
    latest = replay.reruns[-1].data          # holds the revision and the shock
    rows = pd.DataFrame(history_json(replay, capsys)["realised"])
    expected_rows = 0
    for rerun in replay.reruns[:-1]:
        scored = scored_forecasts(rerun, latest)
        horizons = backtest_scores(rerun, ["horizon"]).set_index(["model", "horizon"])
        for (model, horizon), group in scored.groupby(["model", "horizon"]):
            shown = rows[(rows["forecast_run_id"] == rerun.run_id) & (rows["model"] == model)
                         & (rows["horizon"] == horizon)]
            assert len(shown) == 1, (rerun.number, model, horizon)
            shown = shown.iloc[0]
            assert shown["n"] == len(group)
            assert shown["realised_mae"] == pytest.approx(group["error"].abs().mean(), rel=1e-12)
            assert shown["realised_bias"] == pytest.approx(group["error"].mean(), rel=1e-9, abs=1e-9)
            assert shown["expected_mae"] == pytest.approx(horizons.loc[(model, horizon), "mae"], rel=1e-12)
            assert shown["inside_80"] == pytest.approx(group["inside_80"].mean())
            assert shown["inside_95"] == pytest.approx(group["inside_95"].mean())
            expected_rows += 1
        # Rerun k's forecasts reach k+1 .. k+3; the last reruns' only partly have actuals.
        assert sorted(scored["horizon"].unique()) == list(range(1, min(3, RERUNS - 1 - rerun.number) + 1))
    assert len(rows) == expected_rows


def test_a_revised_month_is_scored_again_with_its_new_actual(replay):
    first, reviser = replay.reruns[1], replay.reruns[REVISED_FROM]
    original = actuals(first.data).set_index(["period", "series"]).loc[(str(REVISED_MONTH), REVISED_SERIES), "actual"]
    with closing(sqlite3.connect(replay.ledger)) as conn:
        scores = conn.execute(
            "SELECT run_id, actual FROM realised WHERE forecast_run_id = ? AND model = 'ols' AND period = ? "
            "AND series = ? ORDER BY actual", (replay.reruns[0].run_id, str(REVISED_MONTH), REVISED_SERIES)).fetchall()
    assert scores == [(first.run_id, original), (reviser.run_id, original + REVISION)]


def test_each_run_folder_holds_the_earlier_forecasts_it_scored(replay):
    for rerun in replay.reruns:
        written = rerun.table("realised.csv")
        expected = pd.concat([scored_forecasts(earlier, rerun.data).assign(forecast_run_id=earlier.run_id)
                              for earlier in replay.reruns[:rerun.number]] or [pd.DataFrame()])
        assert len(written) == len(expected)
        if not len(expected):
            continue
        key = ["forecast_run_id", "model", "period", "series"]
        both = written.astype({"period": str}).merge(expected, on=key, suffixes=("", "_direct"))
        assert len(both) == len(expected)
        np.testing.assert_allclose(both["error"], both["error_direct"], rtol=1e-12)
        np.testing.assert_allclose(both["actual"], both["actual_direct"])
        assert (both["inside_95"].astype(float) == both["inside_95_direct"]).all()


# ---------------------------------------------------------------- warnings

def test_a_run_warns_when_the_latest_forecasts_miss_the_backtests_range(replay):
    for rerun in replay.reruns[1:]:
        earlier = replay.reruns[rerun.number - 1]
        recommended = earlier.metrics["recommended"]
        scored = scored_forecasts(earlier, rerun.data)
        own = scored[scored["model"] == recommended]
        outside = own[own["outside_backtest_95"]]
        said = [w for w in rerun.result.warnings if w.startswith("realised accuracy:")]
        summary = (rerun.folder / "summary.md").read_text(encoding="utf-8")
        if len(outside):
            assert len(said) == 1
            assert said[0].startswith(f"realised accuracy: {len(outside)} of {len(own)} forecasts from "
                                      f"{earlier.run_id} ({recommended}")
            for row in outside.head(3).itertuples():
                assert f"{row.period} {row.series}" in said[0]
            assert f"**Warning:** {said[0]}" in summary
        else:
            assert not said
    last = [w for w in replay.reruns[-1].result.warnings if w.startswith("realised accuracy:")]
    assert last and f"{SHOCK_MONTH} {SHOCK_SERIES}" in last[0], "the shocked month must be named"


def test_the_summary_shows_the_track_record_before_the_data(replay):
    first = (replay.reruns[0].folder / "summary.md").read_text(encoding="utf-8")
    assert "This is the first run of this spec in the ledger" in first
    summary = (replay.reruns[-1].folder / "summary.md").read_text(encoding="utf-8")
    assert summary.index("## Track record") < summary.index("## Data")
    assert f"{RERUNS - 1} earlier run(s) of this spec are in the ledger `{replay.ledger}`" in summary
    first_run_row = next(line for line in summary.splitlines()
                         if line.startswith(f"| {replay.reruns[0].run_id} | OLS | 1 |"))
    scored = scored_forecasts(replay.reruns[0], replay.reruns[-1].data)
    one_ahead = scored[(scored["model"] == "ols") & (scored["horizon"] == 1)]
    assert f"| {one_ahead['error'].abs().mean():.4g} |" in first_run_row


def test_the_summary_with_a_track_record_is_rebuilt_from_the_folder_alone(replay, tmp_path, capsys):
    # The track record comes from the ledger at run time; the folder keeps it (track_record.json,
    # realised.csv), so castline report writes the same summary without the ledger or the run.
    copy = tmp_path / "copy"
    shutil.copytree(replay.reruns[-1].folder, copy)
    (copy / "summary.md").unlink()
    assert cli.main(["report", str(copy)]) == 0
    rebuilt = (copy / "summary.md").read_text(encoding="utf-8")
    assert rebuilt == (replay.reruns[-1].folder / "summary.md").read_text(encoding="utf-8")
    assert "## Track record" in rebuilt


# ---------------------------------------------------------------- compare

def month_rows(data: pd.DataFrame) -> dict[str, pd.DataFrame]:
    table = data.assign(period=months_of(data).astype(str))
    return {p: rows.sort_values("region").reset_index(drop=True) for p, rows in table.groupby("period")}


def test_compare_names_the_new_month_the_revised_month_and_the_new_month_to_forecast(replay, capsys):
    before, after = replay.reruns[REVISED_FROM - 1], replay.reruns[REVISED_FROM]
    found = compare_json(replay, capsys, after.run_id, before.run_id)      # newest first
    assert found["given_newest_first"] is True
    assert (found["earlier"]["run_id"], found["later"]["run_id"]) == (before.run_id, after.run_id)
    old, new = month_rows(before.data), month_rows(after.data)
    expected = {}
    for period in sorted(set(old) | set(new)):
        if period in old and period in new and old[period].equals(new[period]):
            continue
        had = int(old[period]["bags_sold"].notna().sum()) if period in old else 0
        has = int(new[period]["bags_sold"].notna().sum()) if period in new else 0
        expected[period] = ("new month to forecast" if period not in old else
                            "actuals added" if had == 0 and has else
                            "actuals revised" if had == has else "other")
    assert expected == {str(REVISED_MONTH): "actuals revised", str(FIRST_CUT + REVISED_FROM): "actuals added",
                        str(FIRST_CUT + REVISED_FROM + 3): "new month to forecast"}
    assert {row["period"]: row["change"] for row in found["months"]} == expected
    added = int(after.data["bags_sold"].notna().sum() - before.data["bags_sold"].notna().sum())
    assert found["data"]["rows_with_actuals_added"] == added == 4
    assert found["data"]["same_input"] is False
    assert found["spec_changes"] == []


def test_compare_ranks_coefficient_moves_and_gives_metric_changes(replay, capsys):
    before, after = replay.reruns[1], replay.reruns[2]
    found = compare_json(replay, capsys, str(before.folder), str(after.folder))   # run folders
    old, new = (r.table("coefficients.csv").set_index(["model", "term"]) for r in (before, after))
    moved = (new["estimate"] - old["estimate"]).to_frame("change")
    moved["change_in_se"] = moved["change"] / old["std_error"]
    ranked = moved[moved["change_in_se"].notna()].reindex(
        moved["change_in_se"].dropna().abs().sort_values(ascending=False).index).head(10)
    shown = found["coefficient_moves"]
    assert [(row["model"], row["term"]) for row in shown] == list(ranked.index)
    for row in shown:
        assert row["change"] == pytest.approx(ranked.loc[(row["model"], row["term"]), "change"], rel=1e-9)
        assert row["change_in_se"] == pytest.approx(ranked.loc[(row["model"], row["term"]), "change_in_se"],
                                                    rel=1e-9)
    scores = [backtest_scores(r, []).set_index("model") for r in (before, after)]
    for row in found["metric_changes"]:
        assert row["mae_change"] == pytest.approx(scores[1].loc[row["model"], "mae"]
                                                  - scores[0].loc[row["model"], "mae"], rel=1e-7, abs=1e-9)


def test_compare_gives_the_spec_keys_that_changed(replay, capsys):
    before, after = replay.reruns[-2], replay.reruns[-1]
    found = compare_json(replay, capsys, before.run_id[:30], after.run_id[-6:])   # start, or tail, of ids
    old, new = (yaml.safe_load((r.folder / "spec.yaml").read_text(encoding="utf-8")) for r in (before, after))
    assert {row["key"]: (row["earlier"], row["later"]) for row in found["spec_changes"]} == {
        key: (old[key], new[key]) for key in CHANGED_SPEC_KEYS}


def test_compare_in_words(replay, capsys):
    before, after = replay.reruns[REVISED_FROM - 1], replay.reruns[REVISED_FROM]
    capsys.readouterr()
    assert cli.main(["compare", before.run_id, after.run_id, "--ledger", str(replay.ledger)]) == 0
    printed = capsys.readouterr().out
    assert f"{REVISED_MONTH}  actuals revised" in printed
    assert "rows with actuals" in printed and "(+4)" in printed
    assert "Spec: the same resolved spec" in printed


# ---------------------------------------------------------------- other forms of history

def test_history_as_csv_and_a_plot(replay, capsys, tmp_path):
    plot = tmp_path / "rmse.png"
    capsys.readouterr()
    assert cli.main(["history", str(replay.spec), "--format", "csv", "--show", "realised",
                     "--plot", str(plot), "--metric", "rmse"]) == 0
    table = pd.read_csv(io.StringIO(capsys.readouterr().out))
    as_json = pd.DataFrame(history_json(replay, capsys)["realised"])
    np.testing.assert_allclose(table["realised_mae"], as_json["realised_mae"], rtol=1e-12)
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert cli.main(["history", "compost-by-region", "--ledger", str(replay.ledger), "--model", "ols"]) == 0
    printed = capsys.readouterr().out
    assert f"{RERUNS} run(s) of compost-by-region" in printed
    assert "mean_baseline" not in printed


def test_the_plot_metrics_offered_are_the_ones_history_gives():
    assert cli.PLOT_METRICS == history.HISTORY_METRICS
