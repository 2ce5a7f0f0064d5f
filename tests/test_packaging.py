"""Every Python package folder under churnlife/ must be listed in pyproject.toml, or a plain
`pip install .` (the Quickstart) ships without it. CI also runs the Quickstart's first command in
a fresh, non-editable install."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_all_packages_are_listed():
    listed = set(
        tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    )
    found = {
        ".".join(p.parent.relative_to(ROOT).parts)
        for p in (ROOT / "churnlife").rglob("__init__.py")
    }
    assert found - listed == set(), "add these to [tool.setuptools] packages in pyproject.toml"
    assert {"churnlife.demo", "churnlife.queries"} <= listed
