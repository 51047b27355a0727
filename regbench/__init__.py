"""regbench: a workbench for linear models on tables whose predictors overlap."""

__version__ = "0.1.0"
