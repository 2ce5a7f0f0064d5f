"""Shared fixtures: the reference folder (../shared/reference beside the project) and a small
demo database built once per test session."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
REFERENCE = Path(os.environ.get("CHURNLIFE_REFERENCE", ROOT.parent / "shared" / "reference"))


@pytest.fixture(scope="session")
def reference() -> Path:
    if not (REFERENCE / "values.json").is_file():
        pytest.fail(f"reference values not found at {REFERENCE}; set CHURNLIFE_REFERENCE")
    return REFERENCE


@pytest.fixture(scope="session")
def ref_values(reference: Path) -> dict:
    return json.loads((reference / "values.json").read_text())


@pytest.fixture(scope="session")
def demo_folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo business (12 000 customers: the full default is 60 000) and its config."""
    import shutil

    from churnlife.demo.generate import build_demo

    folder = tmp_path_factory.mktemp("demo")
    build_demo(folder / "tidewell.duckdb", n_customers=12_000, seed=7)
    shutil.copyfile(ROOT / "demo" / "churnlife.toml", folder / "churnlife.toml")
    return folder


@pytest.fixture(scope="session")
def demo_config(demo_folder: Path):
    from churnlife.config import load_config

    return load_config(demo_folder / "churnlife.toml")


@pytest.fixture(scope="session")
def demo_extract(demo_config):
    from churnlife.extract import run_extract
    from churnlife.source import open_source

    return run_extract(demo_config, open_source(demo_config))
