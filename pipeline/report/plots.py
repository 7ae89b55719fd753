"""Figures for the report, rendered to inline PNG (base64) so the file stays self-contained."""
from __future__ import annotations

import base64
import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..models.families import FAMILIES  # noqa: E402

def plain_text(name, limit: int = 40) -> str:
    """A name from the data as a literal figure label: one line, shortened with an ellipsis past `limit`
    characters so a long name cannot push a figure apart, and every `$` escaped so matplotlib never reads
    `$…$` as math (an unknown macro would stop the drawing). Axis ticks keep their own math formatting."""
    text = " ".join(str(name).split())
    text = text if len(text) <= limit else text[: limit - 1] + "…"
    return text.replace("$", r"\$")

# Okabe & Ito's colour-blind-safe palette (published colour set; common practice for accessible plots):
# each family carries its own colour and marker, the rest of the palette is for other lines.
COLOURS = {f.key: f.colour for f in FAMILIES}
EXTRA = ["#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"]
MARKERS = {f.key: f.marker for f in FAMILIES}
PALETTE = EXTRA + [f.colour for f in FAMILIES]


def encode_png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _arr(values) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def cv_curves(families, loss_label: str) -> str:
    """CV error against λ, one panel per family (their λ scales differ), chosen λ marked."""
    fig, axes = plt.subplots(1, len(families), figsize=(5.2 * len(families), 3.4), squeeze=False)
    for ax, f in zip(axes[0], families):
        col = COLOURS[f["family"]]
        ax.errorbar(_arr(f["lambdas"]), _arr(f["cv_mean"]), yerr=_arr(f["cv_se"]), color=col,
                    marker=MARKERS[f["family"]], ms=3, lw=1.2, elinewidth=0.6, capsize=2)
        ax.axvline(f["lambda_chosen"], color="0.3", ls="--", lw=0.9)
        ax.set_xscale("log")
        ax.set_xlabel("λ (log scale)")
        ax.set_ylabel("CV held-out loss (mean ± SE)")
        ax.set_title(plain_text(f"{f['title']} — {loss_label}", 80), fontsize=10)
        ax.grid(alpha=0.3)
    fig.tight_layout()
    return encode_png(fig)


def error_vs_df(families, loss_label: str) -> str:
    """Both families on one axis: CV error against effective degrees of freedom."""
    fig, ax = plt.subplots(figsize=(6.2, 3.6))
    for f in families:
        col, mean = COLOURS[f["family"]], _arr(f["cv_mean"])
        ax.errorbar(_arr(f["path_df"]), mean, yerr=_arr(f["cv_se"]), color=col, marker=MARKERS[f["family"]],
                    ms=3, lw=1.2, elinewidth=0.6, capsize=2, label=f["title"])
        ax.plot([f["effective_df"]], [mean[f["chosen_index"]]], marker="*", ms=12, color=col,
                markeredgecolor="black", ls="none")
    ax.set_xlabel("effective degrees of freedom ("
                  + "; ".join(f"{fam.short}: {fam.df_description}" for fam in FAMILIES) + ")")
    ax.set_ylabel("CV held-out loss")
    ax.set_title(plain_text(f"Error against model size — {loss_label}", 80), fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return encode_png(fig)


def coefficient_path(f, top: int = 12) -> str:
    """L1 coefficients (feature-output scale) along λ; the features entering earliest are labelled."""
    lambdas = _arr(f["lambdas"])
    names, values = f["coef_path"]["names"], f["coef_path"]["values"]
    fig, ax = plt.subplots(figsize=(6.8, 3.8))
    for vals in values[top:]:
        ax.plot(lambdas, _arr(vals), color="0.75", lw=0.6)
    palette = PALETTE
    styles = ["-", "--", ":", "-."]
    for i, (name, vals) in enumerate(zip(names[:top], values[:top])):
        ax.plot(lambdas, _arr(vals), color=palette[i % len(palette)], ls=styles[(i // len(palette)) % 4],
                lw=1.3, label=plain_text(name))
    ax.axvline(f["lambda_chosen"], color="0.3", ls="--", lw=0.9)
    ax.set_xscale("log")
    ax.set_xlabel("λ (log scale)")
    ax.set_ylabel("coefficient")
    ax.set_title(plain_text(f"Sparse coefficient path — {f['loss_label']}", 80), fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    fig.tight_layout()
    return encode_png(fig)


def stability_paths(stab: dict, top: int = 12) -> str:
    """Selection probability of the most often selected features along λ (sparse family)."""
    paths = stab["l1_paths"]
    lambdas = _arr(paths["lambdas"])
    fig, ax = plt.subplots(figsize=(6.8, 3.6))
    palette = PALETTE
    styles = ["-", "--", ":", "-."]
    for i, (name, probs) in enumerate(zip(paths["names"], paths["probabilities"])):
        kw = dict(color=palette[i % len(palette)], ls=styles[(i // len(palette)) % 4], lw=1.3,
                  label=plain_text(name)) if i < top else dict(color="0.75", lw=0.6)
        ax.plot(lambdas, _arr(probs), **kw)
    ax.axhline(stab["threshold"], color="0.2", ls=":", lw=1.0)
    ax.set_xscale("log")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("λ (log scale)")
    ax.set_ylabel("selection probability")
    ax.set_title(f"Stability paths over {stab['n_resamples']} resamples (dotted: threshold)", fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    fig.tight_layout()
    return encode_png(fig)


def selection_frequency(stab: dict) -> str:
    """How often each top feature is selected at the chosen λ, by each family's notion of selected."""
    freq = stab["frequency"]
    names = freq["names"][::-1]
    y = np.arange(len(names))
    fig, ax = plt.subplots(figsize=(6.8, 0.28 * len(names) + 1.2))
    present = [fam for fam in FAMILIES if fam.key in freq]
    h = 0.8 / len(present)
    for i, fam in enumerate(present):   # bars side by side, the first family on top
        ax.barh(y + (len(present) - 1 - 2 * i) * h / 2, _arr(freq[fam.key][::-1]), height=h, color=fam.colour,
                hatch="//" if i else None, label=f"{fam.title}: {fam.selected_phrase}")
    ax.set_yticks(y, [plain_text(n) for n in names], fontsize=7)
    ax.set_xlim(0, 1)
    ax.set_xlabel("share of resamples")
    ax.set_title("Selection frequency at the chosen λ", fontsize=10)
    ax.legend(fontsize=7, loc="lower right")
    ax.grid(alpha=0.3, axis="x")
    fig.tight_layout()
    return encode_png(fig)
