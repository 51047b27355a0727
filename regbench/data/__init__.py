"""Reading tables, typing columns, building the design matrix (no Qt)."""

from regbench.data.design import Design, ExcludedRow, Roles, UnusableColumn, build_design, design_from_arrays
from regbench.data.reader import read_table, table_from_frame
from regbench.data.table import ColumnInfo, Table

__all__ = [
    "ColumnInfo", "Design", "ExcludedRow", "Roles", "Table", "UnusableColumn",
    "build_design", "design_from_arrays", "read_table", "table_from_frame",
]
