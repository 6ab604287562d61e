"""Shared fixtures. Seeds are explicit; outputs go to tmp_path."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture
def repo() -> Path:
    return REPO


def require_or_skip(condition: bool, reason: str) -> None:
    """Skip when ``condition`` is false, except under CI's HOWL_REQUIRE_AUDIO_LOOPBACK, where it fails."""
    if condition:
        return
    if os.environ.get("HOWL_REQUIRE_AUDIO_LOOPBACK"):
        pytest.fail(f"required under CI but unavailable: {reason}")
    pytest.skip(reason)
