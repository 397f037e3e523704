"""What the run ledger says about earlier runs, read only and returned as tables: the
track record of their forecasts, the history of their metrics, and what changed between two."""
