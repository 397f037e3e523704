"""castline: a monthly forecast rerun from one YAML spec, checked against the mean of the training months."""

from pipeline.core.errors import DataError, SpecError, UserError
from pipeline.core.version import __version__

_LAZY = {"RunResult": "runner", "check": "runner", "run": "runner", "Spec": "spec",
         "load_spec": "spec"}


def __getattr__(name: str):
    # The heavy modules (pandas, scipy, pandera) load on first use, so the command
    # line starts quickly for --help and --version.
    if name in _LAZY:
        from importlib import import_module
        return getattr(import_module(f".{_LAZY[name]}", __name__), name)
    raise AttributeError(f"module 'pipeline' has no attribute {name!r}")


__all__ = ["DataError", "RunResult", "Spec", "SpecError", "UserError", "__version__", "check",
           "load_spec", "run"]
