"""Paths the tests read: the repository root and the stored test data."""

from __future__ import annotations

from pathlib import Path

__all__ = ["DATA", "REPO", "TESTS"]

TESTS = Path(__file__).resolve().parents[1]
REPO = TESTS.parent
DATA = TESTS / "data"
