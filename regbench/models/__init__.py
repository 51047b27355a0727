"""The numerical engine: OLS with set-aside explanations, diagnostics, penalized paths, CV (no Qt)."""
