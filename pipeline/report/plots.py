"""Figures for the report, rendered to inline PNG (base64) so the file stays self-contained."""
from __future__ import annotations

import base64
import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.colors import ListedColormap  # noqa: E402
from matplotlib.layout_engine import PlaceHolderLayoutEngine  # noqa: E402
from matplotlib.patches import Patch, Rectangle  # noqa: E402

from ..models.families import FAMILIES, get_family  # noqa: E402
from ..selection import RULE_TABLE, rule_choices  # noqa: E402

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
INK = "#222222"          # marks and annotations that belong to no family
# Signed coefficients: ColorBrewer's purple–orange diverging scheme, marked colour-blind safe by its
# authors (Harrower & Brewer 2003, colorbrewer2.org); white at zero.
COEF_CMAP = "PuOr"
LEVEL_STYLE = (0, (1, 2))   # dotted: the least CV error plus one standard error


def coefficient_colours() -> ListedColormap:
    """PuOr without its pale middle fifth: the smallest nonzero coefficient is tinted, so exact zeros
    (drawn white) stand apart from small values."""
    base = matplotlib.colormaps[COEF_CMAP]
    return ListedColormap(np.vstack([base(np.linspace(0.0, 0.4, 128)), base(np.linspace(0.6, 1.0, 128))]),
                          name="penduel_coefficients").with_extremes(bad="white")


def encode_png(fig) -> str:
    # fig.tight_layout() leaves a placeholder layout engine behind, and savefig lays out (draws without
    # rendering) any figure that has an engine before drawing it: a second full draw with nothing left to
    # lay out. Dropping the placeholder gives the same pixels in about two thirds of the time.
    if isinstance(fig.get_layout_engine(), PlaceHolderLayoutEngine):
        fig.set_layout_engine(None)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _arr(values) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def style_axes(ax, grid_axis: str = "y") -> None:
    """penduel's axes: no top or right frame, a light grid along one axis only."""
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.grid(alpha=0.25, axis=grid_axis, lw=0.6)
    ax.tick_params(labelsize=8, which="both")


def _picks(f) -> dict:
    """Column picked by every selection rule from this family's CV summary ({} when no λ has a CV mean)."""
    mean = _arr(f["cv_mean"])
    return rule_choices(mean, _arr(f["cv_se"])) if np.isfinite(mean).any() else {}


def _df_label(keys) -> str:
    return "effective degrees of freedom (" + "; ".join(
        f"{fam.short}: {fam.df_description}" for fam in FAMILIES if fam.key in keys) + ")"


def _mark_models(ax, f, col, annotate: bool) -> None:
    """The chosen model as a filled marker with a dark rim; each rule's pick as a hollow ring of the
    rule's marker around it, so a pick that is not the chosen model stands apart."""
    df, mean = _arr(f["path_df"]), _arr(f["cv_mean"])
    for name, i in _picks(f).items():
        ax.plot([df[i]], [mean[i]], ls="none", marker=RULE_TABLE[name].marker, ms=12, mfc="none", mec=col,
                mew=1.4, zorder=4)
    k = f["chosen_index"]
    ax.plot([df[k]], [mean[k]], ls="none", marker=MARKERS[f["family"]], ms=8, color=col, mec=INK, mew=1.2,
            zorder=5)
    if annotate and np.isfinite(mean[k]):
        ax.annotate(f"chosen: df {df[k]:.3g}, λ {f['lambda_chosen']:.3g}", (df[k], mean[k]), xytext=(8, 14),
                    textcoords="offset points", fontsize=7.5, color=INK,
                    bbox=dict(boxstyle="round,pad=0.25", fc="white", ec=col, lw=0.8))


def _key_handles() -> list:
    """Legend entries for the marks, drawn in ink so they read for every family."""
    handles = [Line2D([], [], ls="none", marker="o", ms=7, color="0.55", mec=INK, mew=1.2,
                      label="chosen model (filled, dark rim)")]
    handles += [Line2D([], [], ls="none", marker=r.marker, ms=9, mfc="none", mec=INK, mew=1.2,
                       label=f"pick of {r.phrase}") for r in RULE_TABLE.values()]
    return handles


def cv_curves(families, loss_label: str) -> str:
    return encode_png(cv_figure(families, loss_label))


def cv_figure(families, loss_label: str):
    """Per family: CV error against effective degrees of freedom with a ±1 SE band, the level one standard
    error above the least error, the chosen model and every rule's pick marked; one key below the panels."""
    fig, axes = plt.subplots(1, len(families), figsize=(5.2 * len(families), 3.9), squeeze=False)
    for ax, f in zip(axes[0], families):
        col, fam = COLOURS[f["family"]], get_family(f["family"])
        df, mean, se = _arr(f["path_df"]), _arr(f["cv_mean"]), _arr(f["cv_se"])
        ax.fill_between(df, mean - se, mean + se, color=col, alpha=0.18, lw=0)
        ax.plot(df, mean, color=col, marker=MARKERS[f["family"]], ms=3, lw=1.4)
        if _picks(f):
            best = int(np.nanargmin(np.where(np.isfinite(mean), mean, np.nan)))
            ax.axhline(mean[best] + se[best], color=INK, ls=LEVEL_STYLE, lw=0.9)
        _mark_models(ax, f, col, annotate=True)
        ax.set_xlabel(f"effective degrees of freedom ({fam.df_description})", fontsize=8.5)
        ax.set_ylabel("CV held-out loss", fontsize=8.5)
        ax.set_title(plain_text(f"{f['title']} — {loss_label}", 80), fontsize=10, loc="left")
        style_axes(ax)
    key = [Patch(color="0.6", alpha=0.35, label="mean CV loss ± 1 standard error"),
           Line2D([], [], color=INK, ls=LEVEL_STYLE, lw=0.9, label="least error + 1 standard error")]
    fig.legend(handles=key + _key_handles(), fontsize=7.5, frameon=False, loc="lower center", ncol=3)
    fig.tight_layout(rect=(0, 0.13, 1, 1))
    return fig


def error_vs_df(families, loss_label: str) -> str:
    """Both families on one axis: CV error against effective degrees of freedom, chosen models marked."""
    fig, ax = plt.subplots(figsize=(6.6, 3.8))
    handles = []
    for f in families:
        col = COLOURS[f["family"]]
        df, mean, se = _arr(f["path_df"]), _arr(f["cv_mean"]), _arr(f["cv_se"])
        ax.fill_between(df, mean - se, mean + se, color=col, alpha=0.12, lw=0)
        handles += ax.plot(df, mean, color=col, marker=MARKERS[f["family"]], ms=3, lw=1.4, label=f["title"])
        _mark_models(ax, f, col, annotate=False)
    ax.set_xlabel(_df_label({f["family"] for f in families}), fontsize=8.5)
    ax.set_ylabel("CV held-out loss (band: ± 1 SE)", fontsize=8.5)
    ax.set_title(plain_text(f"Error against model size — {loss_label}", 80), fontsize=10, loc="left")
    style_axes(ax)
    ax.legend(handles=handles + _key_handles(), fontsize=7.5, frameon=False, loc="center left",
              bbox_to_anchor=(1.01, 0.5))
    fig.tight_layout()
    return encode_png(fig)


def _tick_positions(n: int, most: int = 7) -> np.ndarray:
    return np.unique(np.linspace(0, n - 1, min(n, most)).round().astype(int))


def coefficient_path(f, top: int = 20) -> str:
    return encode_png(coefficient_figure(f, top))


def coefficient_figure(f, top: int = 20):
    """Coefficient map of the sparse family: one row per feature in order of entry (named on the left),
    one column per path step from the simplest model; colour is the signed coefficient, white exactly
    zero, hatched grey a failed fit. The bottom axis reads effective degrees of freedom, the top one λ;
    the chosen model's column is framed solid, another rule's pick dashed."""
    names, values = f["coef_path"]["names"], f["coef_path"]["values"]
    shown = min(top, len(names))
    grid = np.array([_arr(v) for v in values[:shown]])
    lambdas, df = _arr(f["lambdas"]), _arr(f["path_df"])
    finite = np.abs(grid[np.isfinite(grid)])
    reach = float(finite.max()) if finite.size and finite.max() > 0 else 1.0
    fig, ax = plt.subplots(figsize=(7.2, 0.24 * shown + 1.9))
    failed = ~np.isfinite(grid)
    if failed.any():
        ax.imshow(np.where(failed, 1.0, np.nan), aspect="auto", cmap=ListedColormap(["0.8"]), interpolation="nearest")
    image = ax.imshow(np.ma.masked_where(~np.isfinite(grid) | (grid == 0), grid), aspect="auto",
                      cmap=coefficient_colours(), vmin=-reach, vmax=reach, interpolation="nearest")
    ax.set_yticks(range(shown), [plain_text(n, 36) for n in names[:shown]], fontsize=7)
    ticks = _tick_positions(len(df))
    ax.set_xticks(ticks, [f"{df[i]:.3g}" for i in ticks], fontsize=7.5)
    ax.set_xlabel("effective degrees of freedom along the path →", fontsize=8.5)
    top_axis = ax.secondary_xaxis("top")
    top_axis.set_xticks(ticks, [f"{lambdas[i]:.2g}" for i in ticks], fontsize=7)
    top_axis.set_xlabel("λ", fontsize=8.5)
    k = f["chosen_index"]
    ax.add_patch(Rectangle((k - 0.5, -0.5), 1, shown, fill=False, ec=INK, lw=2.0))
    frames = "solid frame: chosen model"
    for name, i in _picks(f).items():
        if i != k:
            ax.add_patch(Rectangle((i - 0.5, -0.5), 1, shown, fill=False, ec=INK, lw=1.3, ls="--"))
            frames += f"; dashed: pick of {RULE_TABLE[name].phrase}"
    bar = fig.colorbar(image, ax=ax, pad=0.02, fraction=0.05)
    bar.set_label("coefficient (feature-map output scale; white = 0)", fontsize=7.5)
    bar.ax.tick_params(labelsize=7)
    more = len(names) - shown
    ax.set_title(plain_text(f"Sparse coefficient map — {f['loss_label']}", 80) + f"\n{frames}"
                 + (f"; {more} later-entering features not shown" if more else ""), fontsize=9, loc="left")
    fig.tight_layout()
    return fig


def stability_paths(stab: dict, top: int = 12) -> str:
    """Selection probability of the most often selected features along λ (sparse family)."""
    paths = stab["l1_paths"]
    lambdas = _arr(paths["lambdas"])
    fig, ax = plt.subplots(figsize=(6.8, 3.6), layout="constrained")
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
    return encode_png(fig)


def selection_frequency(stab: dict) -> str:
    """How often each top feature is selected at the chosen λ, by each family's notion of selected."""
    freq = stab["frequency"]
    names = freq["names"][::-1]
    y = np.arange(len(names))
    fig, ax = plt.subplots(figsize=(6.8, 0.28 * len(names) + 1.2), layout="constrained")
    present = [fam for fam in FAMILIES if fam.key in freq]
    h = 0.8 / len(present)
    for i, fam in enumerate(present):   # bars side by side, the first family on top
        ax.barh(y + (len(present) - 1 - 2 * i) * h / 2, _arr(freq[fam.key][::-1]), height=h, color=fam.colour,
                hatch="//" if i else None, label=f"{fam.title}: {fam.selected_phrase}")
    ax.set_yticks(y, [plain_text(n) for n in names], fontsize=7)
    ax.set_xlim(0, 1)
    ax.set_xlabel("share of resamples")
    ax.set_title("Selection frequency at the chosen λ" + ("" if len(present) > 1 else f" — {present[0].title} only"),
                 fontsize=10)
    ax.legend(fontsize=7, loc="lower right")
    ax.grid(alpha=0.3, axis="x")
    return encode_png(fig)
