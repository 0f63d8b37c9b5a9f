"""Engines that reduce a data source to what ``prepare`` counts (``base.py``)."""

from .base import (
    ENGINE_NAMES,
    KEEP_COLUMN,
    WEIGHT_COLUMN,
    ColumnMap,
    CountRequest,
    DataSource,
    Engine,
    Filter,
    Reduction,
)

__all__ = [
    "ENGINE_NAMES",
    "KEEP_COLUMN",
    "WEIGHT_COLUMN",
    "ColumnMap",
    "CountRequest",
    "DataSource",
    "Engine",
    "Filter",
    "Reduction",
]
