"""The numerical engine: OLS with set-aside explanations, diagnostics, penalized paths, CV (no Qt)."""

#: Version of the numbers the engine produces.  Raise it in the same commit as any change that
#: alters a fitted number (a solver, a default, a rule); project files whose cached results carry
#: another version are fitted again on opening (regbench/project/FORMAT.md).
ENGINE_VERSION = 6
