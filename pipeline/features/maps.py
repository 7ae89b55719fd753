"""The feature-map table as data: each map's settings model, output width and a builder that imports its
transformer only when a fit needs it (so reading a config never loads scikit-learn). The transformers live in
basic.py (identity, polynomial terms, random Fourier features) and extra.py (spline basis, random ReLU units,
kernel dictionary). Importing this module registers every map in pipeline.features.registry.MAPS.
"""
from __future__ import annotations

from math import comb
from typing import Literal, Union

from pydantic import Field, field_validator

from ..kernels import KERNELS
from ..settings import Settings
from .registry import MapKind, register_map


class IdentityMap(Settings):
    kind: Literal["identity"] = Field(description="The input columns themselves.")


class PolynomialMap(Settings):
    kind: Literal["polynomial"] = Field(description="Products of standardised inputs up to a degree.")
    degree: int = Field(2, ge=2, le=5, description="Highest total degree.")
    interaction_only: bool = Field(False, description="Only products of distinct columns.")


class RandomFourierMap(Settings):
    kind: Literal["random_fourier"] = Field(
        description="Random Fourier features approximating a Gaussian kernel (Rahimi & Recht 2007).")
    n_components: int = Field(300, ge=1, le=5_000_000, description="Number of random features.")
    bandwidth: Union[float, Literal["median"]] = Field(
        "median", description="Gaussian bandwidth σ on standardised inputs, or 'median' for the "
                              "median pairwise distance of training rows.")

    @field_validator("bandwidth")
    @classmethod
    def _positive(cls, v):
        if not isinstance(v, str) and v <= 0:
            raise ValueError("bandwidth must be positive or 'median'")
        return v


class SplineMap(Settings):
    kind: Literal["spline"] = Field(description="B-spline basis of each standardised input, knots at quantiles.")
    n_knots: int = Field(6, ge=2, le=200, description="Knots per input column.")
    degree: int = Field(3, ge=1, le=5, description="Spline degree.")


class RandomReLUMap(Settings):
    kind: Literal["random_relu"] = Field(description="max(0, ωᵀx + b) with random Gaussian ω, b.")
    n_components: int = Field(500, ge=1, le=5_000_000, description="Number of random features.")


class KernelDictionaryMap(Settings):
    kind: Literal["kernel_dictionary"] = Field(
        description="Columns k(x, z_j) at training rows or k-means centres: the sparse counterpart of the "
                    "representer form.")
    kernel: Literal[tuple(KERNELS)] = Field("rbf", description="Kernel of the dictionary columns.")
    n_centres: int | None = Field(None, ge=1, description="Number of centres; none uses every training row.")
    centres: Literal["rows", "kmeans"] = Field("rows", description="Centres at training rows or k-means centres.")
    bandwidth: float | None = Field(None, gt=0.0, description="Kernel length scale; none uses the median distance.")


def polynomial_width(spec, n_inputs: int, n_rows=None) -> int:
    if spec.interaction_only:
        return sum(comb(n_inputs, d) for d in range(2, spec.degree + 1))
    return sum(comb(n_inputs + d - 1, d) for d in range(2, spec.degree + 1))



def _identity(spec, seed):
    from .basic import IdentityColumns
    return IdentityColumns()


def _polynomial(spec, seed):
    from .basic import PolynomialTerms
    return PolynomialTerms(spec.degree, spec.interaction_only)


def _random_fourier(spec, seed):
    from .basic import RandomFourier
    return RandomFourier(spec.n_components, spec.bandwidth, seed)


def _spline(spec, seed):
    from .extra import SplineBasis
    return SplineBasis(spec.n_knots, spec.degree)


def _random_relu(spec, seed):
    from .extra import RandomReLU
    return RandomReLU(spec.n_components, seed)


def _kernel_dictionary(spec, seed):
    from .extra import KernelDictionary
    return KernelDictionary(spec.kernel, spec.n_centres, spec.centres, spec.bandwidth, seed)


register_map(MapKind("identity", IdentityMap, _identity, lambda spec, n_inputs, n_rows=None: n_inputs,
                     standardised_input=False, sparse_input=True))
register_map(MapKind("polynomial", PolynomialMap, _polynomial, polynomial_width))
register_map(MapKind("random_fourier", RandomFourierMap, _random_fourier,
                     lambda spec, n_inputs, n_rows=None: spec.n_components))
register_map(MapKind("spline", SplineMap, _spline,
                     lambda spec, n_inputs, n_rows=None: n_inputs * (spec.n_knots + spec.degree - 1)))
register_map(MapKind("random_relu", RandomReLUMap, _random_relu, lambda spec, n_inputs, n_rows=None: spec.n_components))
register_map(MapKind("kernel_dictionary", KernelDictionaryMap, _kernel_dictionary,
                     lambda spec, n_inputs, n_rows=None: spec.n_centres or n_rows or n_inputs))
