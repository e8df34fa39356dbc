"""GUI tests run offscreen; the session model's tests need no Qt at all."""

import os

# before any Qt import: no display is needed or used
os.environ["QT_QPA_PLATFORM"] = "offscreen"
os.environ.setdefault("EDGEWISE_SKIP_QT_PROBE", "1")

from pathlib import Path  # noqa: E402

import pytest  # noqa: E402

from gui_data import EXAMPLE, collider_frame, latent_frame  # noqa: E402


@pytest.fixture
def collider_csv(tmp_path) -> Path:
    path = tmp_path / "collider.csv"
    collider_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def latent_csv(tmp_path) -> Path:
    path = tmp_path / "latent.csv"
    latent_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def example_csv(tmp_path) -> Path:
    """The bundled example when present, else a generated table of the same shape."""
    data = EXAMPLE / "data.csv"
    if data.exists():
        return data
    path = tmp_path / "example.csv"
    collider_frame(2000).to_csv(path, index=False)
    return path
