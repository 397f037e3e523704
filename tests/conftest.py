"""Shared fixtures: paths to the project's own test data and the demo."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TEST_DATA = ROOT / "tests" / "data"
DEMO_SPEC = ROOT / "configs" / "compost_demo.yaml"


@pytest.fixture
def demo_spec_path() -> Path:
    return DEMO_SPEC
