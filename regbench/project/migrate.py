"""Bringing older project files up to the current format.

Each step takes the parsed ``session.json`` of format N and returns format N+1.
Steps never touch the table or the cached results; a migrated project has its
cached results ignored (they are recomputed), because their keys were made by
an older layout.

Format 0 (the first layout, before regbench 0.1): the fit settings sat under
``fit_settings``, the roles were spread at the top level (``target``,
``predictors``, ``categorical``, ``weights``, ``groups``), chosen penalties were
called ``alphas`` and the stress tests ``stress_tests``; there were no extra
fits and no view state.
"""

from __future__ import annotations

from regbench.errors import ProjectError

FORMAT_VERSION = 1

_ROLE_KEYS = ("target", "predictors", "categorical", "weights", "groups")


def migrate_0_to_1(doc: dict) -> dict:
    """Format 0 ``session.json`` -> format 1."""
    if not isinstance(doc, dict):
        raise ProjectError("session.json: the top level must be an object; the file is damaged")
    out = {k: v for k, v in doc.items() if k not in _ROLE_KEYS + ("fit_settings", "alphas", "stress_tests")}
    if "target" not in doc:
        raise ProjectError("session.json: field target is missing (format 0 keeps the roles at the top level); "
                           "the file is damaged")
    out["roles"] = {k: doc.get(k) for k in _ROLE_KEYS}
    for key in ("predictors", "categorical"):
        if out["roles"][key] is None:
            out["roles"][key] = []
    # Before the choice existed, weights were precision weights (inference counted rows);
    # roles without weights_kind read as precision.
    out["settings"] = doc.get("fit_settings", {})
    out["chosen_alpha"] = doc.get("alphas", {})
    out["stress"] = doc.get("stress_tests", [])
    out.setdefault("extra_fits", [])
    out.setdefault("view_state", {})
    return out


#: format N -> function producing format N+1
MIGRATIONS = {0: migrate_0_to_1}


def migrate(doc: dict, version: int) -> dict:
    """Apply every step from ``version`` up to :data:`FORMAT_VERSION`."""
    while version < FORMAT_VERSION:
        step = MIGRATIONS.get(version)
        if step is None:
            raise ProjectError(f"manifest.json: format_version {version} is older than any this regbench can read; "
                               "open it with the regbench release that made it and save it again")
        doc = step(doc)
        version += 1
    return doc
