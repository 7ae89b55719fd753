"""Stability: resampling schemes (a table), the resample splits the fit tasks refit, the measures
(Nogueira index, selection probabilities, sign agreement, prediction instability, the
Meinshausen–Bühlmann bound, correlated groups) and the stage summary."""
from .measures import (compare_families, correlated_groups, correlated_groups_sharing, family_stability,
                       held_out_matrix, lambda_range_for_error_bound, mb_error_bound, nogueira_stability,
                       prediction_instability, selected, selection_probabilities, sign_consistency,
                       stable_set, top_k_sets, union_sizes)
from .schemes import SCHEME_TABLE, SCHEMES, Scheme, held_out_rows, in_fit_mask, resample_indices
from .stage import (StabilityResult, resample_grid, resample_grids, resample_splits, stability_losses, stability_stage,
                    summarise_families, with_resamples)

__all__ = [
    "SCHEME_TABLE", "SCHEMES", "Scheme", "StabilityResult", "compare_families", "correlated_groups",
    "correlated_groups_sharing", "family_stability", "held_out_matrix", "held_out_rows", "in_fit_mask",
    "lambda_range_for_error_bound", "mb_error_bound", "nogueira_stability", "prediction_instability",
    "resample_grid", "resample_grids", "resample_indices", "resample_splits", "selected",
    "selection_probabilities", "sign_consistency",
    "stability_losses", "stability_stage", "stable_set", "summarise_families", "with_resamples",
    "top_k_sets", "union_sizes",
]
