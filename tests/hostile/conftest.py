"""The `hostile` fixture; the harness itself is in hostile_cases.py (see its docstring)."""

from __future__ import annotations

from pathlib import Path

import pytest

from hostile_cases import Hostile


@pytest.fixture
def hostile(tmp_path: Path) -> Hostile:
    return Hostile(tmp_path)
