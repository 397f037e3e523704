"""The version of castline, written into every run folder, ledger row and model file."""

__version__ = "0.1.0"
