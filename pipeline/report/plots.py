"""Figures for the report, rendered to inline PNG (base64) so the file stays self-contained."""
from __future__ import annotations

import base64
import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

# Okabe & Ito's colour-blind-safe palette (published colour set; common practice for accessible plots).
COLOURS = {"l1": "#0072B2", "l2": "#D55E00"}
EXTRA = ["#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"]
MARKERS = {"l1": "o", "l2": "s"}


def _encode(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def cv_curves(family_results, loss_label: str) -> str:
    """CV error against λ, one panel per family (their λ scales differ), chosen λ marked."""
    fig, axes = plt.subplots(1, len(family_results), figsize=(5.2 * len(family_results), 3.4), squeeze=False)
    for ax, r in zip(axes[0], family_results):
        col = COLOURS[r.family]
        ax.errorbar(r.lambdas, r.cv_mean, yerr=r.cv_se, color=col, marker=MARKERS[r.family], ms=3,
                    lw=1.2, elinewidth=0.6, capsize=2)
        ax.axvline(r.lambda_chosen, color="0.3", ls="--", lw=0.9)
        ax.set_xscale("log")
        ax.set_xlabel("λ (log scale)")
        ax.set_ylabel("CV held-out loss (mean ± SE)")
        ax.set_title(f"{r.title} — {loss_label}", fontsize=10)
        ax.grid(alpha=0.3)
    fig.tight_layout()
    return _encode(fig)


def error_vs_df(family_results, loss_label: str) -> str:
    """Both families on one axis: CV error against effective degrees of freedom."""
    fig, ax = plt.subplots(figsize=(6.2, 3.6))
    for r in family_results:
        df = r.path.effective_df
        ax.errorbar(df, r.cv_mean, yerr=r.cv_se, color=COLOURS[r.family], marker=MARKERS[r.family], ms=3,
                    lw=1.2, elinewidth=0.6, capsize=2, label=r.title)
        ax.plot([r.effective_df], [r.cv_mean[r.chosen_index]], marker="*", ms=12, color=COLOURS[r.family],
                markeredgecolor="black", ls="none")
    ax.set_xlabel("effective degrees of freedom (L1: nonzeros; L2: trace of the hat matrix)")
    ax.set_ylabel("CV held-out loss")
    ax.set_title(f"Error against model size — {loss_label}", fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _encode(fig)


def coefficient_path(r, feature_names, top: int = 12) -> str:
    """L1 coefficients (feature-output scale) along λ; the features entering earliest are labelled."""
    coef = r.path.coef
    fig, ax = plt.subplots(figsize=(6.8, 3.8))
    nonzero = np.abs(coef) > 0
    first = np.where(nonzero.any(0), nonzero.argmax(0), coef.shape[0] + 1)
    order = np.argsort(first, kind="stable")
    labelled = [j for j in order[:top] if nonzero[:, j].any()]
    others = [j for j in np.flatnonzero(nonzero.any(0)) if j not in set(labelled)]
    if others:
        ax.plot(r.lambdas, coef[:, others], color="0.75", lw=0.6)
    palette = EXTRA + [COLOURS["l1"], COLOURS["l2"]]
    styles = ["-", "--", ":", "-."]
    for i, j in enumerate(labelled):
        ax.plot(r.lambdas, coef[:, j], color=palette[i % len(palette)], ls=styles[(i // len(palette)) % 4],
                lw=1.3, label=str(feature_names[j])[:40])
    ax.axvline(r.lambda_chosen, color="0.3", ls="--", lw=0.9)
    ax.set_xscale("log")
    ax.set_xlabel("λ (log scale)")
    ax.set_ylabel("coefficient")
    ax.set_title(f"Sparse coefficient path — {r.loss_label}", fontsize=10)
    ax.grid(alpha=0.3)
    if labelled:
        ax.legend(fontsize=7, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    fig.tight_layout()
    return _encode(fig)
