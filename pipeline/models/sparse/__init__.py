"""Sparse (L1 / elastic-net) family: λ path with working sets, exact zeros and a certificate per fit.

Modules: path (the path fit, grid, prediction, degrees of freedom), routing (which solver
takes which problem), restricted (solvers on a working set), active_set (Newton refinement
for smooth losses), certificate (duality gap, KKT), dual (intercept-only dual point, λ_max),
family (the common interface, `SPARSE`).
"""
from pipeline.models.sparse.dual import intercept_only_dual, lambda_max
from pipeline.models.sparse.family import SPARSE, SparseFamily
from pipeline.models.sparse.path import (L1Path, default_lambdas, degrees_of_freedom, fit_l1_path, lambda_grid,
                                         predict_path)
from pipeline.models.sparse.routing import SOLVER_TABLE, SOLVERS

__all__ = ["SPARSE", "SparseFamily", "L1Path", "fit_l1_path", "lambda_grid", "default_lambdas", "predict_path",
           "degrees_of_freedom", "lambda_max", "intercept_only_dual", "SOLVERS", "SOLVER_TABLE"]
