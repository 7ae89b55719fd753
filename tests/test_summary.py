"""The sentences around a verdict: which to trust when the two tests disagree, and the summary paragraph's
caveats (a λ at a grid end makes a result not comparable)."""
from __future__ import annotations

from pipeline.evaluate import decide, reconcile
from pipeline.evaluate.summary import paragraph


def test_disagreeing_tests_get_one_sentence_saying_which_to_trust():
    fold = {"low": -0.1, "high": 0.2, "p_value": 0.28}
    text = reconcile(0.1, 0.3, fold, "sparse (L1)", "ridge-type (L2)")
    assert text.startswith("The fold test does not confirm that sparse (L1) is better (p = 0.28); trust the "
                           "held-out interval: its rows took no part in fitting or in choosing λ")
    assert text.endswith(".") and ". " not in text          # one sentence
    assert reconcile(0.1, 0.3, {"low": 0.05, "high": 0.2, "p_value": 0.01}, "a", "b") is None      # both: a
    assert "points the other way, to b" in reconcile(0.1, 0.3, {"low": -0.3, "high": -0.1, "p_value": 0.01}, "a", "b")
    assert "favours b" in reconcile(-0.1, 0.3, {"low": -0.3, "high": -0.1, "p_value": 0.01}, "a", "b")
    assert reconcile(0.1, 0.3, None, "a", "b") is None


def _family(key, title, value, nnz, grid_end=None):
    return {"family": key, "title": title, "metrics": {"rmse": value}, "n_nonzero": nnz, "n_features": 40,
            "effective_df": 5.0, "grid_end": grid_end}


def test_summary_paragraph_names_the_winner_the_unit_and_a_grid_end_caveat():
    d = vars(decide("squared", "regression", unit="kg"))
    fams = {"l1": _family("l1", "sparse (L1)", 1.0, 4), "l2": _family("l2", "ridge-type (L2)", 1.4, None, "largest")}
    verdict = {"loss": "squared", "diff": 0.4, "low": 0.2, "high": 0.6, "reconcile": None}
    stab = {"families": {"l1": {"stability": 0.81}}}
    text = paragraph(verdict, fams, "l1", "l2", d, {"low": 0.1, "high": 0.5, "p_value": 0.02}, stab, 0.9, 50)
    assert text.startswith("Judged on RMSE (kg), because the squared loss fits the conditional mean")
    assert "Sparse (L1) predicted better on the 50 held-out rows (sparse (L1) 1 kg, ridge-type (L2) 1.4 kg), by 0.4 kg" \
        in text
    assert "kept 4 of 40 features, stability index 0.81" in text and "The fold-by-fold test agrees" in text
    assert "chose the largest λ of its grid" in text and "ridge-type (L2), so its result is not comparable" in text
    # an undecided verdict says so, and no caveat appears without a grid end
    fams["l2"]["grid_end"] = None
    text = paragraph({**verdict, "diff": 0.1, "low": -0.1, "high": 0.3}, fams, "l1", "l2", d, None, None, 0.9, 50)
    assert "Neither family is clearly better" in text and "do not decide" in text and "Caution" not in text
