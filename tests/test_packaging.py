"""Packaging: every subpackage is installed, and the default model ships inside the package."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_subpackage_is_listed_in_pyproject():
    listed = set(
        tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    )
    found = {
        ".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "fracto").rglob("__init__.py")
    }
    assert found - listed == set(), "add these packages to [tool.setuptools] packages"
    assert "fracto.models_data" in listed


def test_default_model_files_are_in_models_folder():
    names = {p.name for p in (ROOT / "models").iterdir()}
    assert any(n.endswith(".skops") for n in names)
    assert any(n.endswith(".json") for n in names)
