"""Where the rows come from: a file, a bundled open dataset or a synthetic scenario."""
from __future__ import annotations

from typing import Annotated, Literal, Union

from pydantic import Field, model_validator

from ..data import BUNDLED, SCENARIOS
from ..settings import Settings

SCENARIO_CHOICES: tuple[str, ...] = tuple(SCENARIOS)
BUNDLED_CHOICES: tuple[str, ...] = tuple(BUNDLED)


class SourceBase(Settings):
    unit: str | None = Field(None, max_length=40, description="Unit of the target (e.g. 'kg', 'USD'), named "
                                                             "beside every metric in the report; none: unnamed.")


class FileSource(SourceBase):
    kind: Literal["csv", "parquet"] = Field(description="Read a CSV or Parquet file.")
    path: str = Field(description="File path, relative to the config file's folder.")
    target: str = Field(description="Name of the column to predict.")
    weights: str | None = Field(None, description="Column of row weights (positive numbers; never a feature). "
                                                  "Every fit minimises the weighted mean loss, so an integer weight "
                                                  "counts a row that many times; held-out metrics stay unweighted "
                                                  "unless verdict.weighted_metrics is true.")
    task: Literal["auto", "regression", "classification"] = Field(
        "auto", description="What the target is. 'auto': text or true/false values, two distinct values, or at "
                            "most 10 integer codes each in at least 5 rows are class labels (classification), "
                            "other numbers a quantity (regression); a note says what was decided. The losses "
                            "must be of this kind.")


class SparseSource(SourceBase):
    kind: Literal["npz"] = Field(description="Read a sparse matrix written by scipy.sparse.save_npz (CSR or CSC); "
                                             "it is kept sparse through every stage that allows it.")
    path: str = Field(description="The .npz file, relative to the config file's folder.")
    feature_names: str = Field(description="Text file with one feature name per line, in column order.")
    target_file: str = Field(description="Text file with one target value (a number or a class label) per line, "
                                         "in row order.")
    target: str = Field("target", description="Name of the target, as the report shows it.")
    task: Literal["auto", "regression", "classification"] = Field(
        "auto", description="What the target is; 'auto' decides as for a CSV target column.")


class BundledSource(SourceBase):
    kind: Literal["bundled"] = Field(description="An open dataset shipped with scikit-learn.")
    name: Literal[BUNDLED_CHOICES] = Field(
        description=" or ".join(b.description for b in BUNDLED.values()) + ".")


class ScenarioSource(SourceBase):
    kind: Literal["scenario"] = Field(description="A synthetic scenario that records its ground truth.")
    name: Literal[SCENARIO_CHOICES] = Field(
        description="; ".join(f"{s.name}: {s.description}" for s in SCENARIOS.values()) + ".")
    n_samples: int = Field(160, ge=10, le=1_000_000, description="Number of rows.")
    n_features: int = Field(400, ge=2, le=1_000_000, description="Number of columns.")
    n_informative: int = Field(6, ge=1, description="Columns that carry the signal.")
    correlation: float = Field(0.95, ge=0.0, lt=1.0,
                               description="Correlation between neighbouring columns (spectral_bands).")
    noise: float = Field(1.0, gt=0.0, description="Noise standard deviation (regression) or label-flip scale.")
    seed: int = Field(0, ge=0, description="Seed of the data draw (separate from the experiment seed).")

    @model_validator(mode="after")
    def _informative_fits(self) -> "ScenarioSource":
        if self.n_informative > self.n_features:
            raise ValueError(f"n_informative ({self.n_informative}) exceeds n_features ({self.n_features})")
        return self


DataSource = Annotated[Union[FileSource, SparseSource, BundledSource, ScenarioSource], Field(discriminator="kind")]
