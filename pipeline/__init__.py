"""castline: a monthly forecast rerun from one YAML spec, checked against the mean baseline."""

__version__ = "0.1.0"

from .errors import DataError, SpecError, UserError  # noqa: E402
from .runner import RunResult, check, run  # noqa: E402
from .spec import Spec, load_spec  # noqa: E402

__all__ = ["DataError", "RunResult", "Spec", "SpecError", "UserError", "__version__", "check",
           "load_spec", "run"]
