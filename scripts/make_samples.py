"""Regenerate sample_projects/ from the seeded demo scenario.

    python scripts/make_samples.py

Writes sample_projects/greenhouse.csv and, through the project-file code,
sample_projects/greenhouse.regbench (fitted, with stress and stability results), and the
yes/no sample sample_projects/grading.csv and grading.regbench.  ``--only grading`` (or
``greenhouse``) regenerates one of them.
"""

from __future__ import annotations

import pathlib
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from regbench.demo import GRADING_ROLES, GREENHOUSE_ROLES, grading, greenhouse  # noqa: E402


def main() -> int:
    only = sys.argv[sys.argv.index("--only") + 1] if "--only" in sys.argv else None
    if only not in (None, "greenhouse", "grading"):
        print(f"--only: '{only}' is not a sample; choose greenhouse or grading")
        return 2
    out = ROOT / "sample_projects"
    out.mkdir(exist_ok=True)
    if only in (None, "grading"):
        frame = grading()
        csv_path = out / "grading.csv"
        frame.to_csv(csv_path, index=False, float_format="%.6g", lineterminator="\n")
        print(f"wrote {csv_path.relative_to(ROOT)} ({len(frame)} rows)")
        from regbench.project import save_project
        from regbench.session import build_grading_session

        path = out / "grading.regbench"
        save_project(build_grading_session(csv_path, GRADING_ROLES), path)
        print(f"wrote {path.relative_to(ROOT)}")
    if only == "grading":
        return 0
    frame = greenhouse()
    csv_path = out / "greenhouse.csv"
    frame.to_csv(csv_path, index=False, float_format="%.6g", lineterminator="\n")
    print(f"wrote {csv_path.relative_to(ROOT)} ({len(frame)} rows)")
    try:
        from regbench.session import build_sample_session
        from regbench.project import save_project
    except ImportError as exc:  # the project layer is not there yet
        print(f"project file skipped: {exc}")
        return 0
    session = build_sample_session(csv_path, GREENHOUSE_ROLES)
    path = out / "greenhouse.regbench"
    save_project(session, path)
    print(f"wrote {path.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
