"""A year of monthly reruns of one spec into one ledger, replayed month by month, with two
published actuals revised on the way: compare's forecast revisions, the ledger's re-scoring of a
revised actual, the months compare says changed, and the report in a browser.

A plumbing test on invented data. compost_panel() makes the panel (seeded numpy): four garden
centre branches selling bags of potting compost, monthly from 2022-01 to 2027-02, each at its
own level, all with the same trend, the same yearly season peaking in spring and the same effect
of a planned shelf price (a yearly rise and an occasional offer, known in the months to forecast
too), and noise. The shared shape lets the pooled OLS (a level per branch) be the recommended
model in every rerun, so compare's revisions are of forecasts that move; with a trend per branch,
the same month last year won and its forecasts never moved between reruns. No
figure here is a reference value: every expected value is computed in this file from the run
folders' files (forecast.csv, metrics.json) and the data each rerun read, with pandas (and a
plain sqlite3 read of the ledger where the ledger is the subject) as the reference, never read
back from castline's own functions.

The replay: rerun 0 holds 48 months of actuals (to 2025-12) and forecasts the next three
months, whose prices are in the file with the sales empty; each later rerun holds one more month
of actuals, to rerun 11 (actuals to 2026-11). Rerun 5 revises Bramley's 2026-03 actual (first
published by rerun 3; forecast by reruns 0 to 2) and rerun 9 revises Dunmore's 2026-07 actual
(published by rerun 7; forecast by reruns 4 to 6); a revision stays in every later rerun's data.
Every rerun reads the same spec.yaml and data.csv (the file is replaced each month, as a user
replaces it) and writes into one output folder, so into one ledger. Validation is rolling origin
at the last six origins, three months ahead; the models are OLS and the baselines castline adds.

The module fixture `replay` is meant for more tests of the same replay (castline history among
them): see Replay.
"""

from __future__ import annotations

import json
import sqlite3
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from browser import CHROMEDRIVER, CHROMIUM, NEEDS_A_BROWSER, open_page, read_page

import pipeline
from pipeline import cli
from pipeline.core.catalogue import model_label

SEED = 20220101
FIRST_MONTH = pd.Period("2022-01", "M")
FIRST_CUT = pd.Period("2025-12", "M")      # rerun 0's last month of actuals (48 months)
RERUNS = 12
AHEAD = 3                                   # months to forecast in every rerun
# branch: bags a month at the start; every branch adds GROWTH bags a month and has the same
# spring peak, so a pooled OLS with a level per branch fits the panel's design
BRANCHES = {"Ashby": 820, "Bramley": 1150, "Colwick": 640, "Dunmore": 980}
GROWTH, PEAK, PRICE_EFFECT = 3.5, 280, -60      # bags a month; bags at the peak; bags per €1
# rerun: (branch, month, bags added to its published actual); the revision stays from then on
REVISIONS = {5: ("Bramley", "2026-03", 140), 9: ("Dunmore", "2026-07", -95)}
SPEC = {
    "name": "compost-branches",
    "description": "Bags of potting compost sold per branch and month, rerun monthly.",
    "input": {"file": "data.csv", "date_column": "month", "period": "month", "series": ["branch"],
              "as_of": "2027-06-30"},                               # no test depends on today's date
    "target": "bags_sold",
    "drivers": {"numeric": [{"column": "price", "future": "given"}],
                "categorical": [{"column": "branch", "encoding": "one_hot", "reference": "Ashby"}],
                "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 2}},
    "validation": {"method": "rolling_origin", "horizon": AHEAD, "min_train_periods": 36, "origins": 6},
    "models": ["ols"],
    "output": {"folder": "runs"},
}
KEY = ["model", "period", "series"]


def compost_panel(seed: int = SEED) -> pd.DataFrame:
    """Return the invented panel: one row per branch and month, every month with its sales."""
    rng = np.random.default_rng(seed)
    months = pd.period_range(FIRST_MONTH, FIRST_CUT + RERUNS - 1 + AHEAD, freq="M")
    rows = []
    for branch, level in BRANCHES.items():
        for index, month in enumerate(months):
            offer = month.month in (4, 9) and rng.random() < 0.7         # a planned spring or autumn offer
            price = 7.49 + 0.30 * (month.year - 2022) - (0.80 if offer else 0.0)
            season = PEAK * np.sin(2 * np.pi * (month.month - 2) / 12)   # highest in May
            bags = level + GROWTH * index + season + PRICE_EFFECT * (price - 7.49) + rng.normal(0, 0.04 * level)
            rows.append({"month": month.to_timestamp().strftime("%Y-%m-%d"), "branch": branch,
                         "bags_sold": max(0, round(bags)), "price": round(price, 2)})
    return pd.DataFrame(rows).sort_values(["month", "branch"], kind="stable").reset_index(drop=True)


def months_of(frame: pd.DataFrame) -> pd.PeriodIndex:
    return pd.PeriodIndex(pd.to_datetime(frame["month"]), freq="M")


def published_by(month: str) -> int:
    """The rerun whose data first holds the month's actuals."""
    return (pd.Period(month, "M") - FIRST_CUT).n


def rerun_data(panel: pd.DataFrame, rerun: int) -> pd.DataFrame:
    """Return the data rerun `rerun` is given: actuals to its last month, the next three months
    with their prices and no sales, and every revision made by this rerun or an earlier one."""
    cut = FIRST_CUT + rerun
    frame = panel[months_of(panel) <= cut + AHEAD].copy().reset_index(drop=True)
    months = months_of(frame)
    frame["bags_sold"] = frame["bags_sold"].astype("Int64").mask(months > cut)
    for reviser, (branch, month, change) in REVISIONS.items():
        if rerun >= reviser:
            frame.loc[(months == pd.Period(month, "M")) & (frame["branch"] == branch), "bags_sold"] += change
    return frame


# ---------------------------------------------------------------- the replay (module fixture)

@dataclass(frozen=True)
class Replay:
    """Twelve reruns of one spec into one ledger, oldest first; rerun k is index k.

    spec      the spec every rerun read (castline history SPEC finds the ledger from it)
    ledger    the ledger file all of them wrote
    results   what pipeline.run returned for each rerun (results[k].folder.path: its run folder)
    data      the data.csv each rerun read, as pandas read it back
    revised   rerun → (branch, month) of the published actual it revised
    """

    spec: Path
    ledger: Path
    results: list
    data: list[pd.DataFrame]
    revised: dict[int, tuple[str, str]]

    def folder(self, rerun: int) -> Path:
        return self.results[rerun].folder.path

    def run_id(self, rerun: int) -> str:
        return self.results[rerun].folder.run_id

    def table(self, rerun: int, name: str) -> pd.DataFrame:
        """A CSV of the rerun's folder, its period and series as text."""
        return pd.read_csv(self.folder(rerun) / name, dtype={"period": str, "series": str})

    def metrics(self, rerun: int) -> dict:
        return json.loads((self.folder(rerun) / "metrics.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def replay(tmp_path_factory) -> Replay:
    base = tmp_path_factory.mktemp("history_replay")
    spec_path = base / "spec.yaml"
    spec_path.write_text(yaml.safe_dump(SPEC, sort_keys=False), encoding="utf-8")
    panel = compost_panel()
    results, data = [], []
    for rerun in range(RERUNS):
        rerun_data(panel, rerun).to_csv(base / "data.csv", index=False)
        data.append(pd.read_csv(base / "data.csv"))
        results.append(pipeline.run(spec_path))
    return Replay(spec=spec_path, ledger=base / "runs" / "ledger.sqlite", results=results, data=data,
                  revised={rerun: (branch, month) for rerun, (branch, month, _) in REVISIONS.items()})


# ---------------------------------------------------------------- computed directly

def actuals(data: pd.DataFrame) -> pd.Series:
    """The data's actuals, indexed by (period, series)."""
    known = data[data["bags_sold"].notna()]
    return pd.Series(known["bags_sold"].to_numpy(float),
                     index=pd.MultiIndex.from_arrays([months_of(known).astype(str), known["branch"]],
                                                     names=["period", "series"]))


def stated_method(replay: Replay, rerun: int, model: str) -> str:
    """The interval method the rerun's summary stated for a model: of the methods its forecasts
    have, the one whose backtest 95% coverage in metrics.json came closest to 95%, else the
    first it has (the summary's rule, README)."""
    own = replay.table(rerun, "forecast.csv").query("model == @model")
    available = [m for m in ("analytic", "empirical") if own[f"{m}_low_95"].notna().any()]
    coverage = [row for row in replay.metrics(rerun)["interval_coverage"] if row["model"] == model
                and row["level"] == 0.95 and row["coverage"] is not None and row["method"] in available]
    if coverage:
        return min(coverage, key=lambda row: abs(row["coverage"] - 0.95))["method"]
    return available[0]


def expected_revisions(replay: Replay, earlier: int, later: int) -> pd.DataFrame:
    """The reference for compare's revisions: a pandas merge of the two runs' forecast.csv on
    (model, period, series), for the later run's recommended model (metrics.json). change =
    later − earlier; earlier_width_80 = the earlier run's stated 80% interval, high − low (empty
    where it has no width); change_in_widths = change / earlier_width_80 (revisions.py)."""
    model = replay.metrics(later)["recommended"]
    old = replay.table(earlier, "forecast.csv").query("model == @model")
    new = replay.table(later, "forecast.csv").query("model == @model")
    method = stated_method(replay, earlier, model)
    width = old[f"{method}_high_80"] - old[f"{method}_low_80"]
    both = old.assign(width=width.where(width > 0)).merge(new, on=KEY, suffixes=("_earlier", "_later"))
    both = both.sort_values(["period", "series"]).reset_index(drop=True)
    change = both["forecast_later"] - both["forecast_earlier"]
    return pd.DataFrame({"period": both["period"], "series": both["series"],
                         "earlier": both["forecast_earlier"], "later": both["forecast_later"],
                         "change": change, "earlier_width_80": both["width"],
                         "change_in_widths": change / both["width"], "model": both["model"]})


def changed_months(before: pd.DataFrame, after: pd.DataFrame) -> dict[str, str]:
    """The months whose rows differ between two reruns' data (pandas), each named as compare
    names it: actuals added (no sales before, sales now), actuals revised (sales in both), or a
    new month to forecast (a month the earlier data lacked)."""
    key = ["month", "branch"]
    both = before.merge(after, on=key, how="outer", suffixes=("_before", "_after"), indicator=True)
    differs = both["_merge"] != "both"
    for column in ("bags_sold", "price"):
        old, new = both[f"{column}_before"], both[f"{column}_after"]
        differs |= ~((old == new) | (old.isna() & new.isna()))
    changes = {}
    for month, rows in both[differs].groupby("month"):
        if (rows["_merge"] == "right_only").all():
            changes[month[:7]] = "new month to forecast"
        elif rows["bags_sold_before"].isna().all() and rows["bags_sold_after"].notna().all():
            changes[month[:7]] = "actuals added"
        elif rows["bags_sold_before"].notna().all() and rows["bags_sold_after"].notna().all():
            changes[month[:7]] = "actuals revised"
        else:
            changes[month[:7]] = "unexpected"
    return changes


def compare_json(replay: Replay, capsys, earlier: int, later: int) -> dict:
    capsys.readouterr()
    assert cli.main(["compare", replay.run_id(earlier), replay.run_id(later), "--ledger", str(replay.ledger),
                     "--format", "json"]) == 0
    return json.loads(capsys.readouterr().out)


def ledger_table(replay: Replay, sql: str, *params) -> pd.DataFrame:
    """A plain sqlite3 read of the ledger."""
    with closing(sqlite3.connect(replay.ledger)) as conn:
        return pd.read_sql_query(sql, conn, params=params)


# ---------------------------------------------------------------- the replay itself

def test_each_rerun_holds_one_more_month_and_lands_in_the_one_ledger(replay):
    runs = ledger_table(replay, "SELECT run_id, state, last_period, history_rows, future_rows, folder "
                                "FROM runs ORDER BY created, run_id")
    # the reference: the data each rerun read (pandas) and its run folder
    assert list(runs["run_id"]) == [replay.run_id(k) for k in range(RERUNS)]
    assert set(runs["state"]) == {"placed"}
    for k, run in runs.iterrows():
        data = replay.data[k]
        known = months_of(data[data["bags_sold"].notna()])
        ahead = months_of(data[data["bags_sold"].isna()])
        assert known.max() == FIRST_CUT + k and known.nunique() == 48 + k
        assert sorted(ahead.unique()) == [FIRST_CUT + k + h for h in range(1, AHEAD + 1)]
        assert data.loc[data["bags_sold"].isna(), "price"].notna().all()    # the price is planned
        assert run["last_period"] == str(FIRST_CUT + k) and run["folder"] == str(replay.folder(k))
        assert run["history_rows"] == len(known) and run["future_rows"] == len(ahead) == AHEAD * 4
        assert replay.metrics(k)["recommended"] == "ols", "the panel's design: OLS fits it"
        forecast = replay.table(k, "forecast.csv")
        assert sorted(forecast["period"].unique()) == [str(FIRST_CUT + k + h) for h in range(1, AHEAD + 1)]
    # each revised actual: absent before it was published, then as published, then revised
    for reviser, (branch, month, change) in REVISIONS.items():
        first = published_by(month)
        published = actuals(replay.data[first])[(month, branch)]
        for k in range(RERUNS):
            shown = actuals(replay.data[k]).get((month, branch))
            assert shown == (None if k < first else published if k < reviser else published + change), k


# ---------------------------------------------------------------- compare's forecast revisions

# Consecutive pairs: two ordinary ones, and the two across a rerun that revised an actual.
@pytest.mark.parametrize("later", [2, *sorted(REVISIONS), RERUNS - 1])
def test_forecast_revisions_equal_a_merge_of_the_two_runs_forecast_csv(replay, later, tmp_path, capsys):
    earlier = later - 1
    target = tmp_path / "revisions.csv"
    capsys.readouterr()
    assert cli.main(["compare", replay.run_id(earlier), replay.run_id(later), "--ledger", str(replay.ledger),
                     "--revisions", str(target)]) == 0
    written = pd.read_csv(target, dtype={"period": str, "series": str})
    # the reference: a pandas merge of the two runs' forecast.csv
    expected = expected_revisions(replay, earlier, later)
    pd.testing.assert_frame_equal(written, expected, rtol=1e-12, atol=0)
    # compare chose the later run's recommended model; both runs forecast its two months between
    assert set(written["model"]) == {replay.metrics(later)["recommended"]}
    assert sorted(written["period"].unique()) == [str(FIRST_CUT + later + h) for h in (1, 2)]
    assert len(written) == 2 * len(BRANCHES)
    assert written["earlier_width_80"].gt(0).all() and written["change"].ne(0).all()
    printed = capsys.readouterr().out
    assert f"Forecast revisions of {model_label(expected['model'].iloc[0])}: {len(expected)} month-series" in printed


# ---------------------------------------------------------------- the ledger re-scores revised actuals

@pytest.mark.parametrize("reviser", sorted(REVISIONS))
def test_the_ledger_scores_a_revised_actual_again(replay, reviser):
    branch, month, change = REVISIONS[reviser]
    first = published_by(month)
    scored = ledger_table(replay, "SELECT * FROM realised WHERE period = ? AND series = ?", month, branch)
    # the reference: the forecast.csv of every earlier rerun that forecast the month, and the
    # actual each scoring rerun read
    forecasts = pd.concat([replay.table(k, "forecast.csv").assign(forecast_run_id=replay.run_id(k), rerun=k)
                           for k in range(RERUNS)])
    forecasts = forecasts[(forecasts["period"] == month) & (forecasts["series"] == branch)]
    assert sorted(forecasts["rerun"].unique()) == [first - 3, first - 2, first - 1]
    for scorer in (first, reviser):
        actual = actuals(replay.data[scorer])[(month, branch)]
        rows = scored[scored["run_id"] == replay.run_id(scorer)]
        both = forecasts.merge(rows, on=["forecast_run_id", *KEY], suffixes=("", "_ledger"), validate="1:1")
        assert len(both) == len(forecasts) == len(rows) == 3 * 6      # three runs' forecasts of six models
        assert (both["actual"] == actual).all()
        np.testing.assert_allclose(both["error"], both["forecast"] - actual, rtol=1e-12)
        np.testing.assert_allclose(both["forecast_ledger"], both["forecast"], rtol=1e-12)
    assert actuals(replay.data[reviser])[(month, branch)] == actuals(replay.data[first])[(month, branch)] + change
    # no rerun between the two scored it again: its actual had not changed
    assert set(scored["run_id"]) == {replay.run_id(first), replay.run_id(reviser)}


def test_each_rerun_records_scores_only_for_the_month_it_added_and_the_one_it_revised(replay):
    scored = ledger_table(replay, "SELECT run_id, forecast_run_id, period FROM realised")
    # the reference: the months each rerun's data added or revised (REVISIONS, the design)
    for k in range(RERUNS):
        own = scored[scored["run_id"] == replay.run_id(k)]
        expected = set() if k == 0 else {str(FIRST_CUT + k)} | ({REVISIONS[k][1]} if k in REVISIONS else set())
        assert set(own["period"]) == expected, k
        for period, rows in own.groupby("period"):
            forecasters = {replay.run_id(j) for j in range(k)
                           if period in set(replay.table(j, "forecast.csv")["period"])}
            assert set(rows["forecast_run_id"]) == forecasters, (k, period)


# ---------------------------------------------------------------- what compare says changed in the data

@pytest.mark.parametrize("later", range(1, RERUNS))
def test_compare_names_the_months_whose_data_changed(replay, later, capsys):
    earlier = later - 1
    found = compare_json(replay, capsys, earlier, later)
    # the reference: a pandas comparison of the two data frames the reruns read
    expected = changed_months(replay.data[earlier], replay.data[later])
    assert {row["period"]: row["change"] for row in found["months"]} == expected
    new_month = str(FIRST_CUT + later)
    assert expected[new_month] == "actuals added" and expected[str(FIRST_CUT + later + AHEAD)] == "new month to forecast"
    if later in REVISIONS:
        assert expected[REVISIONS[later][1]] == "actuals revised" and len(expected) == 3
    else:
        assert len(expected) == 2
    added = int(replay.data[later]["bags_sold"].notna().sum() - replay.data[earlier]["bags_sold"].notna().sum())
    assert found["data"]["rows_with_actuals_added"] == added == len(BRANCHES)
    assert found["data"]["same_input"] is False and found["spec_changes"] == []


# ---------------------------------------------------------------- the report in a browser

REPORT_SECTIONS = ["answer", "comparison", "backtest", "per-series", "forecast", "track-record", "drivers",
                   "residuals", "data", "run", "cautions"]


@pytest.mark.skipif(not (CHROMIUM and CHROMEDRIVER), reason=NEEDS_A_BROWSER)
@pytest.mark.parametrize("rerun", [min(REVISIONS), RERUNS - 1])
def test_a_reruns_report_loads_in_a_browser_with_no_network_request(replay, rerun, tmp_path):
    page = open_page(replay.folder(rerun) / "report.html", tmp_path / "profile")
    # the reference: the report's sections as test_report.py lists them, and the browser's own
    # record of the page load
    assert page.sections == REPORT_SECTIONS
    assert page.headings[0] == (1, f"{SPEC['name']}: does the model beat the plain average?")
    assert sum(level == 2 for level, _ in page.headings) == len(REPORT_SECTIONS)
    start = page.headings.index((2, "Track record"))
    end = next(i for i, (level, _) in enumerate(page.headings) if i > start and level == 2)
    track = [text for _, text in page.headings[start + 1:end]]
    assert "Forecasts and actuals" in track, page.headings      # earlier forecasts were scored
    assert page.images and all(done and width > 0 and alt > 20 for done, width, alt in page.images)
    assert any(url.startswith("file://") for url in page.requested), page.requested
    assert page.network == [] and page.fetched == []


# ---------------------------------------------------------------- the history page against the ledger

HISTORY_SECTIONS = ["warnings", "runs", "metrics", "realised", "revisions", "changes", "cautions"]


@pytest.fixture(scope="module")
def history_page(replay, tmp_path_factory) -> Path:
    """castline history SPEC --html FILE, as a user runs it after the twelfth rerun."""
    target = tmp_path_factory.mktemp("history_page") / "history.html"
    assert cli.main(["history", str(replay.spec), "--html", str(target)]) == 0
    return target


def latest_scores(replay: Replay) -> pd.DataFrame:
    """Each forecast's latest score: a plain sqlite3 read of the ledger's realised rows, each kept
    from the newest rerun that scored it (pandas), with the scoring rerun's last month."""
    scored = ledger_table(replay, "SELECT r.*, s.created AS scored_created, s.last_period AS scored_period "
                                  "FROM realised r JOIN runs s ON s.run_id = r.run_id")
    scored = scored.sort_values("scored_created", kind="stable")
    return scored.drop_duplicates(["forecast_run_id", *KEY], keep="last")


def recommended_by_run(replay: Replay) -> dict[str, str]:
    runs = ledger_table(replay, "SELECT run_id, recommended FROM runs")
    return dict(zip(runs["run_id"], runs["recommended"]))


def test_the_history_pages_runs_and_metrics_are_the_ledgers(replay, history_page):
    page = read_page(history_page)
    runs = ledger_table(replay, "SELECT run_id, last_period, history_rows, recommended FROM runs "
                                "ORDER BY created, run_id")
    metrics = ledger_table(replay, "SELECT run_id, model, mae, skill_vs_mean FROM model_metrics")
    shown = page.frame("runs-table")
    # the reference: a plain sqlite3 read of the ledger's runs and model_metrics
    assert list(shown["run id"]) == list(runs["run_id"])
    assert list(shown["run"]) == list(runs["last_period"])       # no rerun shares a month here
    assert list(shown["rows with actuals"]) == list(runs["history_rows"].astype(float))
    assert list(shown["recommended"]) == list(runs["recommended"].map(model_label))   # named by the catalogue
    chosen = runs.merge(metrics, left_on=["run_id", "recommended"], right_on=["run_id", "model"])
    np.testing.assert_allclose(shown["MAE"], chosen["mae"], rtol=1e-12)
    np.testing.assert_allclose(shown["skill against the mean"], chosen["skill_vs_mean"], rtol=1e-12)
    period = dict(zip(runs["run_id"], runs["last_period"]))
    for table_id, column in (("metrics-mae", "mae"), ("metrics-skill", "skill_vs_mean")):
        wide = page.frame(table_id).set_index("run")
        expected = metrics.assign(run=metrics["run_id"].map(period)).pivot(index="run", columns="model",
                                                                          values=column)
        if column == "skill_vs_mean":
            expected = expected.drop(columns=["mean_baseline"])
        # a column per model, headed by the model's label
        wide = wide.rename(columns={model_label(name): name for name in expected.columns})
        assert sorted(wide.columns) == sorted(expected.columns) and len(wide) == RERUNS
        np.testing.assert_allclose(wide[expected.columns].to_numpy(float),
                                   expected.loc[wide.index].to_numpy(float), rtol=1e-12)


def test_the_history_pages_realised_accuracy_is_the_ledgers(replay, history_page):
    realised = read_page(history_page).frame("realised-table")
    latest = latest_scores(replay)
    chosen = recommended_by_run(replay)
    own = latest[latest["model"] == latest["forecast_run_id"].map(chosen)]
    period = dict(zip(*ledger_table(replay, "SELECT run_id, last_period FROM runs").T.values))
    # the reference: each run's recommended forecasts' latest scores in the ledger, pooled (pandas)
    expected = own.groupby("forecast_run_id").agg(
        n=("error", "size"), mae=("error", lambda e: e.abs().mean()), bias=("error", "mean"),
        expected=("expected_mae", "mean"), inside_80=("inside_80", "mean"), inside_95=("inside_95", "mean"),
    )
    expected.index = expected.index.map(period)
    expected = expected.sort_index()
    assert list(realised["run"]) == list(expected.index) == [str(FIRST_CUT + k) for k in range(RERUNS - 1)]
    np.testing.assert_array_equal(realised["forecasts"], expected["n"])
    np.testing.assert_allclose(realised["realised MAE"], expected["mae"], rtol=1e-12)
    np.testing.assert_allclose(realised["realised bias"], expected["bias"], rtol=1e-12)
    np.testing.assert_allclose(realised["expected MAE"], expected["expected"], rtol=1e-12)
    np.testing.assert_allclose(realised["inside 80%"], expected["inside_80"], rtol=1e-12)
    np.testing.assert_allclose(realised["inside 95%"], expected["inside_95"], rtol=1e-12)
    # a run's forecasts are scored through the last month of actuals of the newest rerun that scored
    # any of them: a later rerun that revised an actual rescored it (runs 0 to 2 by rerun 5)
    newest = own.sort_values("scored_created").groupby("forecast_run_id")["scored_period"].last()
    newest.index = newest.index.map(period)
    assert list(realised["scored through"]) == list(newest.sort_index())
    assert list(realised["scored through"].iloc[:3]) == [str(FIRST_CUT + 5)] * 3


def test_the_history_pages_revisions_are_the_ledgers_forecasts_summed_over_branches(replay, history_page):
    shown = read_page(history_page).frame("revisions-table")
    forecasts = ledger_table(replay, "SELECT f.run_id, f.model, f.period, f.series, f.forecast, f.horizon, "
                                     "r.last_period, r.created FROM forecasts f JOIN runs r ON r.run_id = f.run_id "
                                     "WHERE f.model = r.recommended")
    # the reference: the ledger's forecasts of each run's recommended model summed over the four
    # branches per target month (pandas), oldest run first; the actual summed from the latest scores
    total = forecasts.groupby(["period", "created", "last_period"], as_index=False).agg(
        forecast=("forecast", "sum"), branches=("series", "size"), horizon=("horizon", "min"))
    assert (total["branches"] == len(BRANCHES)).all()
    total = total.sort_values(["period", "created"], kind="stable")
    kept = sorted(total["period"].unique())[-12:]
    total = total[total["period"].isin(kept)].reset_index(drop=True)
    latest = latest_scores(replay).sort_values("scored_created", kind="stable") \
        .drop_duplicates(["period", "series"], keep="last")
    actual = latest.groupby("period").agg(actual=("actual", "sum"), branches=("series", "size"))
    actual = actual[actual["branches"] == len(BRANCHES)]["actual"]
    assert list(shown["target month"]) == list(total["period"])
    assert list(shown["run"]) == list(total["last_period"])
    np.testing.assert_array_equal(shown["months ahead"], total["horizon"])
    np.testing.assert_allclose(shown["forecast"], total["forecast"], rtol=1e-12)
    change = total.groupby("period", sort=False)["forecast"].diff()
    np.testing.assert_allclose(shown["change"], change, rtol=1e-12, equal_nan=True)
    expected_actual = total["period"].map(actual)
    np.testing.assert_allclose(shown["actual"], expected_actual, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(shown["error"], total["forecast"] - expected_actual, rtol=1e-12, equal_nan=True)
    # the revised month's total carries the revision (the data the last rerun read, pandas)
    month = REVISIONS[9][1]
    if month in kept:
        last = replay.data[-1]
        assert actual[month] == last.loc[months_of(last) == pd.Period(month, "M"), "bags_sold"].sum()


def test_the_history_pages_changes_name_each_month_the_ledger_fingerprints_changed(replay, history_page):
    changes = read_page(history_page).frame("changes-table")
    periods = ledger_table(replay, "SELECT p.run_id, p.period, p.actual_rows, p.sha256, r.created FROM periods p "
                                   "JOIN runs r ON r.run_id = p.run_id ORDER BY r.created")
    ids = [replay.run_id(k) for k in range(RERUNS)]
    assert list(changes["from"]) == [str(FIRST_CUT + k) for k in range(RERUNS - 1)]
    assert list(changes["to"]) == [str(FIRST_CUT + k) for k in range(1, RERUNS)]
    assert set(changes.columns) == {"from", "to", "data"}     # no spec key, planned driver or model changed
    for k in range(1, RERUNS):
        # the reference: the ledger's per-month fingerprints of the two runs (sqlite3 and pandas):
        # a month with actuals in both whose fingerprint differs was revised
        old = periods[periods["run_id"] == ids[k - 1]].set_index("period")
        new = periods[periods["run_id"] == ids[k]].set_index("period")
        both = old.merge(new, left_index=True, right_index=True, suffixes=("_old", "_new"))
        revised = sorted(both.index[(both["sha256_old"] != both["sha256_new"]) & (both["actual_rows_old"] > 0)
                                    & (both["actual_rows_new"] > 0)])
        text = changes["data"].iloc[k - 1]
        assert text.startswith(f"actuals added for {FIRST_CUT + k}"), text
        assert f"new month to forecast: {FIRST_CUT + k + AHEAD}" in text
        assert revised == ([REVISIONS[k][1]] if k in REVISIONS else [])
        assert (f"actuals revised: {revised[0]}" in text) if revised else ("revised" not in text), text


@pytest.mark.skipif(not (CHROMIUM and CHROMEDRIVER), reason=NEEDS_A_BROWSER)
def test_the_history_page_loads_in_a_browser_with_no_network_request(history_page, tmp_path):
    page = open_page(history_page, tmp_path / "profile")
    # the reference: the browser's own record of the page load, and the page's design (a section
    # per h2, in order, each heading level under the one above)
    assert page.sections == HISTORY_SECTIONS
    assert page.headings[0] == (1, f"{SPEC['name']}: how its forecasts have done, run by run")
    assert [text for level, text in page.headings if level == 2] == [
        "Warnings", "The runs", "Backtest metrics across runs", "Realised accuracy against expectation",
        "How the forecasts were revised", "What changed between runs", "Cautions"]
    levels = [level for level, _ in page.headings]
    assert all(b <= a + 1 for a, b in zip(levels, levels[1:]))       # no level skipped
    # MAE, skill, realised against expected, errors against their band, the revision fan
    assert len(page.images) == 5
    assert all(done and width > 0 and alt > 20 for done, width, alt in page.images)
    assert any(url.startswith("file://") for url in page.requested), page.requested
    assert page.network == [] and page.fetched == []
