"""The report's pictures leave matplotlib's global settings as they were.

Importing pipeline.present.plots and drawing pictures must not change
matplotlib.rcParams nor choose a backend: the pictures are drawn on figures of
their own with the Agg canvas, in a style set only while each is drawn
(matplotlib.rc_context). The reference is a snapshot of matplotlib.rcParams
taken in a fresh interpreter before the import (read without resolving the
backend); the data drawn are a few invented numbers.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import matplotlib
import numpy as np
import pandas as pd
from conftest import ROOT

from pipeline.present import plots
from pipeline.present.history_plot import plot_history

FRESH = r"""
import json, sys
import matplotlib

def snapshot():
    # dict's own lookup: reading rcParams["backend"] would resolve (and so set) the backend.
    return {key: repr(dict.__getitem__(matplotlib.rcParams, key)) for key in dict.keys(matplotlib.rcParams)}

before = snapshot()
import numpy as np
import pandas as pd
from pipeline.present import plots
after_import = snapshot()
history = pd.DataFrame({"period": [str(p) for p in pd.period_range("2020-01", periods=12, freq="M")],
                        "series": "a", "actual": np.arange(12.0)})
predictions = pd.DataFrame({"origin": "2020-09", "period": history["period"].iloc[-3:].tolist() * 2,
                            "series": "a", "horizon": [1, 2, 3] * 2,
                            "model": ["ols"] * 3 + ["mean_baseline"] * 3,
                            "prediction": [9.5, 10.0, 11.5, 4.0, 4.0, 4.0]})
plots.backtest_picture(history, predictions)
plots.series_picture(history, predictions, "a", "ols", 0.5, ["mean_baseline", "ols"])
after_drawing = snapshot()
changed = lambda after: sorted(k for k in set(before) | set(after) if before.get(k) != after.get(k))
print(json.dumps({"import": changed(after_import), "drawing": changed(after_drawing),
                  "pyplot": "matplotlib.pyplot" in sys.modules}))
"""


def test_importing_the_plots_and_drawing_leaves_rcparams_and_the_backend_unchanged():
    env = dict(os.environ)
    env.pop("MPLBACKEND", None)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    done = subprocess.run([sys.executable, "-c", FRESH], capture_output=True, text=True, env=env,
                          cwd=ROOT, timeout=300)
    assert done.returncode == 0, done.stderr
    found = json.loads(done.stdout.strip().splitlines()[-1])
    assert found == {"import": [], "drawing": [], "pyplot": False}


def _settings() -> dict:
    """Return matplotlib.rcParams as a plain dict, read without resolving the backend (reading
    rcParams["backend"], as comparing RcParams objects does, would choose one)."""
    return {key: dict.__getitem__(matplotlib.rcParams, key) for key in dict.keys(matplotlib.rcParams)}


def _pictures() -> list[str]:
    rng = np.random.default_rng(5)
    residuals = pd.DataFrame({"period": [str(p) for p in pd.period_range("2021-01", periods=24,
                                                                          freq="M")],
                              "fitted": rng.normal(10, 2, 24), "residual": rng.normal(0, 1, 24)})
    return [picture.uri for picture in plots.residual_pictures(residuals)]


def test_drawing_in_this_process_leaves_rcparams_unchanged_and_ignores_the_callers_style():
    before = _settings()
    drawn = _pictures()
    assert _settings() == before
    # The report's own style is set while drawing, over whatever the caller has set.
    with matplotlib.rc_context({"font.size": 20, "axes.grid": False, "grid.color": "red",
                                "figure.dpi": 50, "savefig.dpi": 50}):
        assert _pictures() == drawn
    assert _settings() == before


def test_the_history_plot_leaves_rcparams_unchanged(tmp_path):
    table = pd.DataFrame({"spec_name": "s", "model": ["ols", "ols", "mean_baseline", "mean_baseline"],
                          "run_id": ["a", "b"] * 2, "last_period": ["2023-12", "2024-01"] * 2,
                          "created": ["2024-01-01T00:00:00Z", "2024-02-01T00:00:00Z"] * 2,
                          "mae": [1.0, 0.9, 2.0, 2.1]})
    before = _settings()
    plot_history(table, "mae", tmp_path / "mae.png", "MAE per run")
    assert (tmp_path / "mae.png").stat().st_size > 0
    assert _settings() == before
