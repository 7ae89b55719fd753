"""The experiment file: pydantic models, safe YAML loading, clear errors.

This is the only place defaults live. Every other module receives an
`ExperimentSpec` (or a piece of it) with every value resolved. Every choice list is
read from a registry (losses, kernels, feature maps, datasets, scenarios, execution
backends) when this package is imported, so register new entries before importing it.
"""
from __future__ import annotations

from ..features.maps import (IdentityMap, KernelDictionaryMap, PolynomialMap, RandomFourierMap, RandomReLUMap,
                             SplineMap)
from ..settings import Settings
from .experiment import ExperimentSpec
from .loading import ConfigError, field_path, load_config, load_yaml, parse_config
from .loss_spec import CLASSIFICATION_LOSSES, LOSS_CHOICES, REGRESSION_LOSSES, LossSpec
from .reference import schema_reference
from .sections import (CacheSpec, ExecutionSpec, FamiliesSpec, FeatureMap, FeaturesSpec, L1Spec, L2Spec, ReportSpec,
                       SelectionSpec, SplitSpec, StabilitySpec, TrackingSpec)
from .sources import BUNDLED_CHOICES, SCENARIO_CHOICES, BundledSource, DataSource, FileSource, ScenarioSource

__all__ = [
    "BUNDLED_CHOICES", "BundledSource", "CLASSIFICATION_LOSSES", "CacheSpec", "ConfigError", "DataSource",
    "ExecutionSpec", "ExperimentSpec", "FamiliesSpec", "FeatureMap", "FeaturesSpec", "FileSource", "IdentityMap",
    "KernelDictionaryMap", "L1Spec", "L2Spec", "LOSS_CHOICES", "LossSpec", "PolynomialMap", "REGRESSION_LOSSES",
    "RandomFourierMap", "RandomReLUMap", "ReportSpec", "SCENARIO_CHOICES", "ScenarioSource", "SelectionSpec",
    "Settings", "SplineMap", "SplitSpec", "StabilitySpec", "TrackingSpec", "field_path", "load_config",
    "load_yaml", "parse_config", "schema_reference",
]
