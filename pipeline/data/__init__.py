"""Datasets: one frozen value type and one entry point, `load_dataset`; the tables of bundled
datasets (`BUNDLED`) and synthetic scenarios (`SCENARIOS`)."""
from __future__ import annotations

from .bundled import BUNDLED, BundledDataset, register_bundled
from .dataset import DataError, Dataset, InputColumn, RowDesign
from .loaders import load_dataset
from .scenarios import SCENARIOS, Scenario, register_scenario

__all__ = ["BUNDLED", "BundledDataset", "DataError", "Dataset", "InputColumn", "RowDesign", "SCENARIOS", "Scenario",
           "load_dataset",
           "register_bundled", "register_scenario"]
