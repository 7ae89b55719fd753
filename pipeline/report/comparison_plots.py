"""Figures of the cross-execution comparison, inline PNG like the execution report's."""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..models.families import FAMILIES  # noqa: E402
from .plots import encode_png, style_axes  # noqa: E402

# families side by side around each execution's tick
OFFSET = {f.key: 0.24 * (i - (len(FAMILIES) - 1) / 2) for i, f in enumerate(FAMILIES)}


def _nan(x) -> float:
    return np.nan if x is None else float(x)


def across_executions(block: dict, labels: list[str], primary: str) -> str:
    """Left: held-out primary metric with its interval per execution and family. Right: fit time
    (path + CV) per execution and family, log scale."""
    fig, (ax, bx) = plt.subplots(1, 2, figsize=(10.5, 3.6))
    any_time = False
    for family in FAMILIES:
        fam = family.key
        rows = [r for r in block["rows"] if r["family"] == fam]
        if not rows:
            continue
        x = np.array([r["execution"] for r in rows]) + OFFSET[fam]
        y = np.array([_nan(r["value"]) for r in rows])
        lo = np.array([_nan(r["low"]) for r in rows])
        hi = np.array([_nan(r["high"]) for r in rows])
        err = np.vstack([np.where(np.isnan(lo), 0, y - lo), np.where(np.isnan(hi), 0, hi - y)])
        ax.errorbar(x, y, yerr=err, color=family.colour, marker=family.marker, ls="none", capsize=3,
                    label=family.title)
        secs = np.array([_nan(r["fit_seconds"]) + _nan(r["cv_seconds"]) for r in rows])
        bx.plot(x, secs, color=family.colour, marker=family.marker, ls="none", label=family.title)
        any_time |= bool(np.any(np.isfinite(secs) & (secs > 0)))
    for a in (ax, bx):
        a.set_xticks(range(len(labels)), labels)
        a.set_xlim(-0.5, len(labels) - 0.5)
        style_axes(a)
        a.legend(fontsize=8, frameon=False)
    ax.set_ylabel(f"held-out {primary.replace('_', ' ')} [interval]")
    ax.set_title(f"Held-out error — {block['loss']}", fontsize=10, loc="left")
    if any_time:        # a log axis needs at least one positive time
        bx.set_yscale("log")
    bx.set_ylabel("path fit + CV fits (s, log scale)" if any_time else "path fit + CV fits (s)")
    bx.set_title(f"Time — {block['loss']}", fontsize=10, loc="left")
    fig.tight_layout()
    return encode_png(fig)
