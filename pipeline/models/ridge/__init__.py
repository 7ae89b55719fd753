"""Ridge-type (L2) family in representer form: f = b + Σⱼ cⱼ k(xⱼ, ·), penalty (λ/2)‖f‖²_H.

Modules: path (grid, exact path, prediction), eigen (one eigendecomposition shared by every
λ), closed_form (squared loss with exact LOO/GCV), other_losses (Newton / cvxpy in
eigen-coordinates), nystrom (low-rank route past families.l2.exact_max_rows rows), result
(the path value type), family (the common interface, `RIDGE`).
"""
from pipeline.models.ridge.family import RIDGE, RidgeFamily, RidgeModel, low_rank_setting
from pipeline.models.ridge.path import (KernelEigen, L2Path, fit_l2_path, fit_l2_primal_path, kernel_eigen,
                                        kfold_errors, l2_lambda_grid, predict_path, predict_rows,
                                        primal_weights, spectrum_lambda_grid)

__all__ = ["RIDGE", "RidgeFamily", "RidgeModel", "low_rank_setting", "L2Path", "KernelEigen",
           "kernel_eigen", "l2_lambda_grid", "spectrum_lambda_grid", "fit_l2_path", "fit_l2_primal_path",
           "predict_path", "predict_rows", "primal_weights", "kfold_errors"]
