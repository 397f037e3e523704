"""pandera, imported without the data synthesis castline never uses.

pandera's strategies import hypothesis whenever it is installed (it is, with the test
extras), which costs about half a second at every start of 'castline check' and
'castline run'. castline only validates data with pandera, never synthesises it, so
pandera is imported with hypothesis hidden, and falls back to its own placeholders.
"""

from __future__ import annotations

import sys
from types import ModuleType


def pandera_pandas() -> ModuleType:
    """Return ``pandera.pandas``, imported without hypothesis if nothing imported it yet."""
    if "pandera.strategies.pandas_strategies" in sys.modules or "hypothesis" in sys.modules:
        import pandera.pandas
        return pandera.pandas
    sys.modules["hypothesis"] = None   # an import of it raises ImportError, as if not installed
    try:
        # the strategies load at the first validation otherwise: load them here, without it
        import pandera.pandas
        import pandera.strategies.pandas_strategies
    finally:
        del sys.modules["hypothesis"]   # a later import of hypothesis itself works as usual
    return pandera.pandas
