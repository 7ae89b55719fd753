"""Datasets: one frozen value type and one entry point, `load_dataset`."""
from __future__ import annotations

from .dataset import DataError, Dataset
from .loaders import load_dataset

__all__ = ["DataError", "Dataset", "load_dataset"]
