"""Shared helpers for the tests."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture
def write_file(tmp_path: Path):
    """Write text (or bytes) to a file in a temporary folder; returns its path."""

    def write(name: str, content: str | bytes) -> Path:
        path = tmp_path / name
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content)
        return path

    return write
