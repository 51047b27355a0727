"""What an installed copy carries: every package-data pattern matches a file, FORMAT.md is reachable.

Checked against the packaging configuration itself (pyproject.toml read with
tomllib) and importlib.resources, the standard way an installed package reads
its own files.  Building a wheel needs the network for the build backend, so
that check is done by hand (DEVELOPERS.md: `pip wheel . --no-deps`).
"""

from __future__ import annotations

import importlib.resources
import pathlib
import re
import tomllib

ROOT = pathlib.Path(__file__).resolve().parents[1]


def test_every_package_data_pattern_matches_a_file():
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    data = conf["tool"]["setuptools"]["package-data"]
    assert data, "no package data declared"
    for package, patterns in data.items():
        base = ROOT / package.replace(".", "/")
        for pattern in patterns:
            assert list(base.glob(pattern)), f"package-data pattern {package}/{pattern} matches no file"


def test_the_format_description_ships_with_the_package():
    text = importlib.resources.files("regbench.project").joinpath("FORMAT.md").read_text(encoding="utf-8")
    assert text.startswith("# The `.regbench` project file")
    # README links it at the same path inside the package.
    assert "(regbench/project/FORMAT.md)" in (ROOT / "README.md").read_text(encoding="utf-8")
    assert importlib.resources.files("regbench").joinpath("py.typed").is_file()


def test_statsmodels_is_declared_for_the_benchmark_and_the_tests_and_used_nowhere_else():
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    extras = conf["project"]["optional-dependencies"]
    assert any(d.startswith("statsmodels") for d in extras["bench"])
    assert any(d.startswith("statsmodels") for d in extras["test"])
    assert not any(d.startswith("statsmodels") for d in conf["project"]["dependencies"])
    # Only the benchmark imports it, so an install without the extra loses nothing else.
    importers = sorted(p.name for p in (ROOT / "regbench").rglob("*.py")
                       if re.search(r"^\s*(import|from) statsmodels", p.read_text(encoding="utf-8"), re.M))
    assert importers == ["bench.py"], importers
