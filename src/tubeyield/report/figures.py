"""Figures of a study: axial profiles, the trade-off front, operating-window maps. matplotlib, Agg backend.

Style: one look for every figure; the Okabe-Ito colour-blind-safe palette for lines (M. Okabe and K. Ito, "Color
Universal Design", 2008; recommended by B. Wong, Nature Methods 8 (2011) 441) and the cividis colour map for maps
(J. R. Nunez, C. R. Anderton and R. S. Renslow, PLoS ONE 13 (2018) e0199239); units on every axis.
"""

from __future__ import annotations

from tubeyield.status import SOLVED

import io

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

PALETTE = ["#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000", "#F0E442"]
LINESTYLES = ["-", "--", "-.", ":"]
STYLE = {
    "figure.dpi": 110, "savefig.dpi": 130, "font.size": 9.5, "axes.titlesize": 10.5, "axes.labelsize": 9.5,
    "axes.spines.top": False, "axes.spines.right": False, "axes.grid": True, "grid.color": "#dddddd",
    "grid.linewidth": 0.6, "legend.frameon": False, "axes.prop_cycle": matplotlib.cycler(color=PALETTE),
}


def _label(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else f"{name} [-]"


def save(fig, stem) -> dict:
    """Write <stem>.png and <stem>.svg; return {'png': bytes, 'svg': path, 'png_path': path}."""
    from tubeyield.report.files import write_atomic
    buf = io.BytesIO()
    fig.savefig(buf, format="png", bbox_inches="tight")
    png = buf.getvalue()
    svg = io.StringIO()
    fig.savefig(svg, format="svg", bbox_inches="tight")
    write_atomic(stem.with_suffix(".png"), png)
    write_atomic(stem.with_suffix(".svg"), svg.getvalue())
    plt.close(fig)
    return {"png": png, "png_path": stem.with_suffix(".png").name, "svg_path": stem.with_suffix(".svg").name}


MAJOR_RATIO = 5.0   # species whose largest concentrations exceed this many times those of all the others go on
                    # their own axis (solvent, inerts, a large excess), so they do not flatten the rest


def profiles(profile, symbols, title: str, *, T_limits=(), T_cool=None, space_time: bool = False):
    """Concentrations and temperature along the reactor (rows of the optimum's profile table). `T_limits`:
    (text, bound K) drawn on the temperature panel; `T_cool`: the coolant temperature (K); `space_time`: a gas feed,
    whose axis is space time at inlet conditions (V / v0), not residence time."""
    import numpy as np
    with plt.rc_context(STYLE):
        fig, (ax, axT) = plt.subplots(1, 2, figsize=(9.2, 3.4))
        if "tank" in profile:
            x, xlabel = profile["tank"], _label("tank", "")
            marker = "o"
        else:
            name = "space time at inlet conditions" if space_time else "residence time"
            x, xlabel = profile["residence_time_s"] / 60.0, _label(name, "min")
            marker = None
        peaks = {s: float(np.nanmax(profile[f"C_{s}_mol_per_m3"])) / 1000.0 for s in symbols}
        # the species above the first gap of MAJOR_RATIO in the peaks (largest first) get the right-hand axis
        ranked = sorted(symbols, key=lambda s: -peaks[s])
        major = []
        for k in range(1, len(ranked)):
            if peaks[ranked[k]] > 0 and peaks[ranked[k - 1]] > MAJOR_RATIO * peaks[ranked[k]]:
                major = ranked[:k]
                break
        ax2 = ax.twinx() if major else None
        for i, s in enumerate(symbols):
            target = ax2 if s in major else ax
            target.plot(x, profile[f"C_{s}_mol_per_m3"] / 1000.0, marker=marker, label=s + (" (right)" if s in major
                        else ""), color=PALETTE[i % len(PALETTE)],
                        linestyle=":" if s in major else LINESTYLES[(i // len(PALETTE)) % len(LINESTYLES)])
        ax.set_xlabel(xlabel)
        ax.set_ylabel(_label("concentration", "mol/L"))
        ax.set_title("concentrations")
        handles, labels = ax.get_legend_handles_labels()
        if ax2 is not None:
            ax2.set_ylabel(_label(", ".join(major), "mol/L"))
            ax2.set_ylim(bottom=0.0)
            h2, l2 = ax2.get_legend_handles_labels()
            handles, labels = handles + h2, labels + l2
        ax.legend(handles, labels, ncol=2, fontsize=8)
        axT.plot(x, profile["T_K"], color=PALETTE[3], marker=marker, label="reactor")
        for text, bound in T_limits:
            axT.axhline(bound, color="#b44100", linestyle="--", linewidth=1.0, label=f"limit {text}")
        if T_cool is not None:
            axT.axhline(T_cool, color=PALETTE[0], linestyle=":", linewidth=1.2, label="coolant")
        if T_limits or T_cool is not None:
            axT.legend(fontsize=8)
        axT.set_xlabel(xlabel)
        axT.set_ylabel(_label("temperature", "K"))
        axT.set_title("temperature")
        fig.suptitle(title, fontsize=10.5)
        fig.tight_layout()
        if ax2 is not None:
            fig.subplots_adjust(wspace=0.5)     # room for the right-hand axis of the concentrations
    return fig


def front(result: dict, title: str):
    """The front (left) and how the decisions move along it (right)."""
    pts = result["points"]
    ok = [p for p in pts if p["status"] in SOLVED and not p["dominated"]]
    bad = [p for p in pts if p["status"] not in SOLVED]
    with plt.rc_context(STYLE):
        fig, (ax, axd) = plt.subplots(1, 2, figsize=(9.2, 3.6))
        ax.plot([p["x"] for p in ok], [p["y"] for p in ok], "-o", color=PALETTE[0], ms=3.5, label="front")
        if result.get("knee") is not None:
            k = pts[result["knee"]]
            ax.plot([k["x"]], [k["y"]], "D", color=PALETTE[3], ms=8, label="knee")
        if ok:
            ax.plot([ok[0]["x"], ok[-1]["x"]], [ok[0]["y"], ok[-1]["y"]], ":", color="#777777", lw=1,
                    label="chord between ends")
        for p in bad:
            ax.axvline(p["level"], color=PALETTE[1], lw=0.8, ls="--")
        if bad:
            ax.plot([], [], ls="--", color=PALETTE[1], label="level not attainable")
        ax.set_xlabel(_label(result["x"], ""))
        ax.set_ylabel(_label(result["y"], ""))
        ax.set_title("trade-off front")
        ax.legend(fontsize=8)
        names = [n for n in (ok[0]["decisions"] if ok else {}) if not isinstance(ok[0]["decisions"][n], list)]
        for i, n in enumerate(names):
            vals = np.array([p["decisions"][n] for p in ok], dtype=float)
            span = vals.max() - vals.min()
            if span <= 1e-6 * max(1.0, np.abs(vals).max()):          # constant along the front
                rel, label = np.full_like(vals, 0.5), f"{n} constant at {vals.mean():.4g}"
            else:
                rel, label = (vals - vals.min()) / span, f"{n} ({vals.min():.4g} to {vals.max():.4g})"
            axd.plot([p["x"] for p in ok], rel, LINESTYLES[i % len(LINESTYLES)], color=PALETTE[i % len(PALETTE)],
                     label=label)
        axd.set_xlabel(_label(result["x"], ""))
        axd.set_ylabel(_label("decision, scaled to its range along the front", ""))
        axd.set_title("operating point along the front")
        axd.legend(fontsize=7.5)
        fig.suptitle(title, fontsize=10.5)
        fig.tight_layout()
    return fig


def _levels(values, n: int = 21):
    v = np.asarray(values, dtype=float)
    lo, hi = np.nanmin(v), np.nanmax(v)
    if not np.isfinite(lo) or hi - lo <= 1e-12 * max(1.0, abs(hi)):
        return np.linspace(lo - 0.5, hi + 0.5, 3) if np.isfinite(lo) else np.linspace(0, 1, 3)
    return matplotlib.ticker.MaxNLocator(nbins=n - 1).tick_values(lo, hi)


def window_maps(w, title: str):
    """Goal map with the operating window and limit contours (left); one small map per limit (right)."""
    x, y = w.x_values, w.y_values
    logx = w.x == "tau" and x[-1] / x[0] >= 10
    logy = w.y == "tau" and y[-1] / y[0] >= 10
    limits = list(w.holds)
    # a limit that holds (or fails) in every cell has no edge on the map: no panel, a note in the title instead
    shown = [t for t in limits if w.holds[t].any() and not w.holds[t].all()]
    everywhere = [t for t in limits if w.holds[t].all()]
    nowhere = [t for t in limits if not w.holds[t].any()]
    n_side = max(1, (len(shown) + 1) // 2)           # limit panels on two rows at the right
    with plt.rc_context(STYLE):
        fig = plt.figure(figsize=(5.4 + 2.9 * n_side, 5.2))
        grid = fig.add_gridspec(2, 1 + n_side, width_ratios=[2.4] + [1] * n_side, hspace=0.55, wspace=0.6)
        ax = fig.add_subplot(grid[:, 0])
        goal = w.maps[w.goal]
        cs = ax.contourf(x, y, goal, levels=_levels(goal), cmap="cividis", extend="both")
        fig.colorbar(cs, ax=ax, label=_label(w.goal, ""), format="%.3g", pad=0.03)
        if w.window.any():
            ax.contourf(x, y, w.window.astype(float), levels=[0.5, 1.5], colors="none", hatches=["////"])
            ax.contour(x, y, w.window.astype(float), levels=[0.5], colors="white", linewidths=1.8)
        for i, text in enumerate(shown):
            color = PALETTE[(i + 1) % len(PALETTE)]
            ax.contour(x, y, w.holds[text].astype(float), levels=[0.5], colors=[color], linewidths=1.2,
                       linestyles=LINESTYLES[i % len(LINESTYLES)])
            ax.plot([], [], color=color, ls=LINESTYLES[i % len(LINESTYLES)], label=f"edge of {text}")
        ax.plot([], [], color="white", lw=1.8, label="operating window (all limits hold)")
        if w.optimum:
            ax.plot([w.optimum["x"]], [w.optimum["y"]], "*", color=PALETTE[3], ms=13, mec="white", label="optimum",
                    clip_on=False, zorder=5)              # visible on the map's edge too
        ax.set_xlabel(_label(w.x, w.x_unit))
        ax.set_ylabel(_label(w.y, w.y_unit))
        if logx:
            ax.set_xscale("log")
        if logy:
            ax.set_yscale("log")
        ax.set_title(f"{w.goal}; others at the {'cell optimum' if w.others == 'optimized' else 'optimum'}")
        leg = ax.legend(fontsize=7.5, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, frameon=True)
        leg.get_frame().set_facecolor("#eeeeee")
        for i, text in enumerate(shown):
            sub = fig.add_subplot(grid[i % 2, 1 + i // 2])
            cl = sub.contourf(x, y, w.maps[text], levels=_levels(w.maps[text], 15), cmap="cividis", extend="both")
            bar = fig.colorbar(cl, ax=sub, format="%.3g", pad=0.04)
            bar.ax.tick_params(labelsize=6.5)
            sub.contour(x, y, w.holds[text].astype(float), levels=[0.5], colors="white", linewidths=1.2)
            sub.set_title(f"{text}\n(white: edge)", fontsize=8.5)
            if w.optimum:
                sub.plot([w.optimum["x"]], [w.optimum["y"]], "*", color=PALETTE[3], ms=8, mec="white",
                         clip_on=False, zorder=5)
            sub.tick_params(labelsize=7)
            if logx:
                sub.set_xscale("log")
            if logy:
                sub.set_yscale("log")
            sub.set_xlabel(_label(w.x, w.x_unit), fontsize=7.5)
            sub.set_ylabel(_label(w.y, w.y_unit), fontsize=7.5)
        notes = ([f"holds everywhere: {', '.join(everywhere)}"] if everywhere else []) + \
                ([f"holds nowhere: {', '.join(nowhere)}"] if nowhere else [])
        fig.suptitle(title + (f"\n({'; '.join(notes)})" if notes else ""), fontsize=10.5)
    return fig


def histogram_grid(columns: dict, title: str):
    """Histograms of several quantities (sweep summaries): name -> (values, unit)."""
    n = len(columns)
    cols = min(3, max(1, n))
    rows = (n + cols - 1) // cols
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(rows, cols, figsize=(3.3 * cols, 2.6 * rows), squeeze=False)
        for ax, (name, (values, unit)) in zip(axes.ravel(), columns.items()):
            v = np.asarray([x for x in values if x is not None and np.isfinite(x)], dtype=float)
            if v.size and np.ptp(v) <= 1e-6 * max(1.0, np.abs(v).max()):
                ax.text(0.5, 0.5, f"{v.size} scenarios\nall at {v.mean():.5g} {unit}".rstrip(), ha="center",
                        va="center", transform=ax.transAxes, fontsize=9)
                ax.set_xticks([])
            elif v.size:
                ax.hist(v, bins=min(30, max(5, v.size // 8)), color=PALETTE[0], edgecolor="white")
            ax.set_xlabel(_label(name, unit), fontsize=8)
            ax.set_ylabel("scenarios", fontsize=8)
            ax.yaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))    # counts: whole ticks only
        for ax in axes.ravel()[n:]:
            ax.axis("off")
        fig.suptitle(title, fontsize=10.5)
        fig.tight_layout()
    return fig


FIT_PANELS = 14     # experiments drawn one panel each; the parity and residual panels hold every sample


def fit_curves(fit: dict, title: str):
    """Each experiment's samples (markers) and fitted curves (lines) with the 95 % confidence band of the curve
    (shaded), then a parity plot and the residuals of every sample (all experiments, also those beyond the panels
    shown: at most FIT_PANELS)."""
    all_curves = fit.get("curves", [])
    curves = all_curves[:FIT_PANELS]
    n = len(curves) + 2
    cols = min(4, n)
    rows = (n + cols - 1) // cols
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(rows, cols, figsize=(3.2 * cols, 2.7 * rows), squeeze=False)
        for ax, cv in zip(axes.ravel(), curves):
            t_end = cv["t"][-1]
            unit, f = ("min", 60.0) if t_end >= 300.0 else ("s", 1.0)
            time_name = "residence time" if cv["vessel"] in ("plug", "stirred") else "time"
            t = np.array(cv["t"]) / f
            for i, (s, model) in enumerate(cv["model"].items()):
                colour = PALETTE[i % len(PALETTE)]
                ax.plot(t, model, color=colour, lw=1.3, label=s)
                band = cv.get("band", {}).get(s)
                if band:
                    m, b = np.array(model), np.array(band)
                    ax.fill_between(t, m - b, m + b, color=colour, alpha=0.25, lw=0)
                d = cv["data"][s]
                ax.plot(np.array(d["t"]) / f, d["c"], "o", color=colour, ms=3.2, mfc="white")
            ax.set_title(f"{cv['id']} ({cv['vessel']}, {cv['T']:.1f} K)", fontsize=8)
            ax.set_xlabel(_label(time_name, unit), fontsize=7.5)
            ax.set_ylabel(_label("concentration", "mol/L"), fontsize=7.5)
            ax.legend(fontsize=6.5, frameon=False, ncol=2)
        measured = [v for cv in all_curves for d in cv["data"].values() for v in d["c"]]
        fitted = [v for cv in all_curves for d in cv["data"].values() for v in d["fit"]]
        ax = axes.ravel()[len(curves)]
        ax.plot(measured, fitted, "o", color=PALETTE[0], ms=3, mfc="white")
        top = max(measured + fitted + [1e-12])
        ax.plot([0, top], [0, top], color="0.5", lw=0.8)
        ax.set_xlabel(_label("measured", "mol/L"), fontsize=7.5)
        ax.set_ylabel(_label("fitted", "mol/L"), fontsize=7.5)
        ax.set_title(f"parity: all {len(measured)} samples", fontsize=8)
        ax = axes.ravel()[len(curves) + 1]
        ax.plot(fitted, np.array(measured) - np.array(fitted), "o", color=PALETTE[1], ms=3, mfc="white")
        ax.axhline(0.0, color="0.5", lw=0.8)
        ax.set_xlabel(_label("fitted", "mol/L"), fontsize=7.5)
        ax.set_ylabel(_label("measured - fitted", "mol/L"), fontsize=7.5)
        ax.set_title("residuals", fontsize=8)
        for extra in axes.ravel()[n:]:
            extra.axis("off")
        fig.suptitle(title, fontsize=10)
        fig.tight_layout()
    return fig
