"""Bode and impedance figures of an analysed stage, drawn from the engine's own sweeps.

Every curve is an `AcSystem` sweep of the nominal stage; every limit line comes from
the spec. matplotlib is imported inside the functions (it is heavy) and figures are
drawn on the Agg canvas without touching pyplot's global state.
"""

from __future__ import annotations

import io
import math
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.quantities.units import format_quantity

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis

# Our own neutral, colour-blind-safe palette (a blue/orange pair stays distinct under
# the common colour-vision deficiencies and in greyscale, helped by line styles).
INK = "#1f1f1f"
BLUE = "#1d4e89"
ORANGE = "#c0640f"
MASK = "#9a9a9a"
BAND = "#5a5a5a"
GRID_MAJOR = "#c8c8c8"
GRID_MINOR = "#e6e6e6"

_STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 10.0,
    "axes.titlesize": 11.5,
    "axes.labelsize": 10.5,
    "axes.edgecolor": "#444444",
    "axes.linewidth": 0.8,
    "axes.labelcolor": INK,
    "xtick.color": "#333333",
    "ytick.color": "#333333",
    "xtick.labelsize": 9.5,
    "ytick.labelsize": 9.5,
    "legend.fontsize": 9.0,
    "legend.framealpha": 0.92,
    "legend.edgecolor": "#bbbbbb",
    "hatch.linewidth": 0.6,
    "svg.hashsalt": "stagesynth",  # stable element ids: the same design gives the same file
    "svg.fonttype": "none",  # text as text: several times faster to write, searchable
}

_POINTS_PER_DECADE = 80


# ---------------------------------------------------------------------------
# Frequency range and sweeps
# ---------------------------------------------------------------------------
def _band(analysis: Analysis, spec: Spec | None) -> tuple[float, float] | None:
    """The required band: the spec's when given, else none (nothing to judge against)."""
    if spec is not None:
        return (float(spec.require.f_low), float(spec.require.f_high))
    return None


def plot_range(analysis: Analysis, spec: Spec | None = None) -> tuple[float, float]:
    """A decade below the lower edge to a decade above the upper edge.

    The edges are the required band (when a spec is given) widened to include the
    corners the engine found, so both the mask and the -3 dB points are in view.
    A DC-coupled stage (f_low = 0) or one with no upper corner (f_high = inf) falls
    back to three decades either side of midband.
    """
    mid = analysis.midband
    lo = analysis.f_low if analysis.f_low > 0 else mid / 1e3
    hi = analysis.f_high if math.isfinite(analysis.f_high) else mid * 1e3
    band = _band(analysis, spec)
    if band is not None:
        lo, hi = min(lo, band[0]), max(hi, band[1])
    return lo / 10.0, hi * 10.0


def sweep(lo: float, hi: float, per_decade: int = _POINTS_PER_DECADE) -> np.ndarray:
    """Log-spaced frequencies from lo to hi, `per_decade` points per decade."""
    decades = math.log10(hi / lo)
    return np.logspace(math.log10(lo), math.log10(hi), max(int(decades * per_decade), 2) + 1)


# ---------------------------------------------------------------------------
# Axis helpers
# ---------------------------------------------------------------------------
def eng_label(value: float, unit: str) -> str:
    """Engineering text for a tick or label: 1000 -> "1 kHz", 8.3 -> "8.3 Hz"."""
    return format_quantity(value, unit, digits=3)


def _num(value: float, spec: str) -> str:
    """A number with a typographic minus sign, matching matplotlib's tick labels."""
    return format(value, spec).replace("-", "\u2212")


def _eng_log_axis(axis, unit: str, span_decades: float) -> None:
    """Decade ticks labelled with SI prefixes; on a short axis the 2 and 5 minors too."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    def label(v: float, _pos: int | None = None) -> str:
        return eng_label(v, unit) if v > 0 else ""

    def minor_label(v: float, _pos: int | None = None) -> str:
        mantissa = v / 10.0 ** math.floor(math.log10(v) + 1e-9)
        return label(v) if round(mantissa, 6) in (2.0, 5.0) else ""

    axis.set_major_locator(LogLocator(base=10.0, numticks=15))
    axis.set_minor_locator(LogLocator(base=10.0, subs=np.arange(2, 10), numticks=15))
    axis.set_major_formatter(FuncFormatter(label))
    axis.set_minor_formatter(FuncFormatter(minor_label) if span_decades < 2.5 else NullFormatter())


def _grid(ax) -> None:
    ax.grid(True, which="major", color=GRID_MAJOR, linewidth=0.8)
    ax.grid(True, which="minor", color=GRID_MINOR, linewidth=0.5)
    ax.set_axisbelow(True)


def _new_figure(width: float, height: float) -> Figure:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), facecolor="white")
    FigureCanvasAgg(fig)  # the Agg canvas, without pyplot's global state
    return fig


def _band_lines(ax, band: tuple[float, float] | None, label: bool) -> None:
    if band is None:
        return
    for k, f in enumerate(band):
        ax.axvline(f, color=BAND, linestyle=(0, (2, 2)), linewidth=1.0, zorder=1,
                   label="required band edge" if label and k == 0 else None)


def _forbidden(ax, f0: float, f1: float, y0: float, y1: float, label: str | None,
               colour: str = MASK, edge: float | None = None) -> None:
    """A shaded rectangle the response must stay out of, its limit drawn as a solid edge.

    Flat fills and lines only (no hatching): SVG hatch patterns do not survive every
    browser's inline rendering, and the HTML report must look like the PNG.
    """
    ax.fill_between([f0, f1], [y0, y0], [y1, y1], facecolor=colour, alpha=0.22,
                    edgecolor="none", linewidth=0.0, zorder=1, label=label)
    if edge is not None:
        ax.plot([f0, f1], [edge, edge], color=colour, linewidth=1.3, zorder=2)


def _label_box() -> dict:
    return {"boxstyle": "round,pad=0.25", "facecolor": "white", "edgecolor": "#bbbbbb",
            "alpha": 0.95, "linewidth": 0.6}


# ---------------------------------------------------------------------------
# Bode plot
# ---------------------------------------------------------------------------
def bode_data(analysis: Analysis, spec: Spec | None = None) -> dict[str, np.ndarray]:
    """The sweep behind the Bode plot: frequency (Hz), |gain| (dB), phase (deg)."""
    lo, hi = plot_range(analysis, spec)
    f = sweep(lo, hi)
    h = analysis.system.gain(f)[0]
    mag_db = 20.0 * np.log10(np.maximum(np.abs(h), 1e-300))
    phase = np.degrees(np.unwrap(np.angle(h)))
    # shift by whole turns so that the midband phase lies in (-180, 180]
    mid_phase = float(np.degrees(np.angle(analysis.gain)))
    k = int(np.argmin(np.abs(f - analysis.midband)))
    phase -= 360.0 * round((phase[k] - mid_phase) / 360.0)
    return {"f": f, "mag_db": mag_db, "phase_deg": phase}


def bode_figure(analysis: Analysis, spec: Spec | None = None) -> Figure:
    """Magnitude (dB) and phase (deg) of v_load/v_emf with the spec drawn as a mask."""
    import matplotlib
    from matplotlib.ticker import MultipleLocator

    with matplotlib.rc_context(_STYLE):
        data = bode_data(analysis, spec)
        f, mag, ph = data["f"], data["mag_db"], data["phase_deg"]
        mid_db = analysis.gain_db
        fig = _new_figure(8.6, 7.0)
        gs = fig.add_gridspec(2, 1, height_ratios=(2.1, 1.0), hspace=0.08)
        ax = fig.add_subplot(gs[0])
        axp = fig.add_subplot(gs[1], sharex=ax)

        top = max(float(mag.max()), mid_db) + 8.0
        bottom = max(float(mag.min()), mid_db - 42.0) - 2.0
        band = _band(analysis, spec)
        if spec is not None and band is not None:
            target = spec.require.gain_db
            tol = spec.require.gain_tolerance_db
            top = max(top, target + tol + 8.0)
            bottom = min(bottom, target - tol - 12.0)
            # above the gain window over the required band
            _forbidden(ax, band[0], band[1], target + tol, top + 100.0,
                       "outside the spec", edge=target + tol)
            # below midband - 3 dB inside the band: a -3 dB point there breaks f_low/f_high
            _forbidden(ax, band[0], band[1], bottom - 100.0, mid_db - 3.0, None)
            # the midband gain window target +- tol, judged at the midband frequency
            ax.errorbar([analysis.midband], [target], yerr=[[tol], [tol]], fmt="none",
                        ecolor=INK, elinewidth=1.4, capsize=5, capthick=1.4, zorder=4,
                        label=f"gain window {_num(target, '.1f')} ± {tol:g} dB (at midband)")
        _band_lines(ax, band, label=True)
        _band_lines(axp, band, label=False)

        ax.semilogx(f, mag, color=BLUE, linewidth=2.0, zorder=3, label="gain, nominal")
        ax.axhline(mid_db - 3.0, color=BLUE, linewidth=0.8, linestyle=(0, (6, 3)), alpha=0.7,
                   zorder=2, label=f"midband − 3 dB ({_num(mid_db - 3.0, '.1f')} dB)")
        axp.semilogx(f, ph, color=ORANGE, linewidth=1.8, zorder=3)

        # -3 dB points, marked and labelled in engineering units
        corners = []
        if analysis.f_low > 0:
            corners.append(("f_low", analysis.f_low))
        if math.isfinite(analysis.f_high):
            corners.append(("f_high", analysis.f_high))
        for name, fc in corners:
            ax.plot([fc], [mid_db - 3.0], marker="o", markersize=7, markerfacecolor="white",
                    markeredgecolor=INK, markeredgewidth=1.5, linestyle="none", zorder=5)
            axp.axvline(fc, color=INK, linewidth=0.7, linestyle=(0, (1, 2)), zorder=2)
            ax.annotate(
                f"{name}\n{eng_label(fc, 'Hz')}",
                xy=(fc, mid_db - 3.0), xytext=(0, 34), textcoords="offset points",
                ha="center", va="bottom", fontsize=9.5, color=INK, bbox=_label_box(), zorder=6,
                linespacing=1.15,
                arrowprops={"arrowstyle": "-", "color": INK, "linewidth": 0.7, "shrinkA": 0,
                            "shrinkB": 4},
            )
        if not corners:
            ax.text(0.02, 0.04, "no -3 dB point in range", transform=ax.transAxes, fontsize=9)

        ax.set_ylim(bottom, top)
        ax.set_xlim(f[0], f[-1])
        ax.set_ylabel("|v_load / v_source|  (dB)")
        sense = "inverting" if analysis.inverting else "non-inverting"
        ax.set_title(
            f"Gain: {_num(mid_db, '.2f')} dB {sense} at midband "
            f"{eng_label(analysis.midband, 'Hz')}",
            loc="left",
        )
        ax.tick_params(labelbottom=False)
        span = float(ph.max() - ph.min())
        step = 45.0 if span <= 270 else 90.0
        axp.yaxis.set_major_locator(MultipleLocator(step))
        axp.set_ylim(step * math.floor(ph.min() / step) - 5, step * math.ceil(ph.max() / step) + 5)
        axp.set_ylabel("phase  (°)")
        axp.set_xlabel("frequency  (Hz)")
        for a in (ax, axp):
            _eng_log_axis(a.xaxis, "Hz", math.log10(f[-1] / f[0]))
            _grid(a)
        handles, labels = ax.get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower center", ncols=3, handlelength=2.4,
                   frameon=False, bbox_to_anchor=(0.5, 0.0))
        fig.subplots_adjust(left=0.1, right=0.97, top=0.945, bottom=0.15)
    return fig


# ---------------------------------------------------------------------------
# Impedances
# ---------------------------------------------------------------------------
def impedance_data(analysis: Analysis, spec: Spec | None = None) -> dict[str, np.ndarray]:
    """The sweep behind the impedance plot: frequency (Hz), |Z_in|, |Z_out| (ohm)."""
    lo, hi = plot_range(analysis, spec)
    f = sweep(lo, hi)
    return {
        "f": f,
        "z_in": np.abs(analysis.system.z_in(f)[0]),
        "z_out": np.abs(analysis.system.z_out(f)[0]),
    }


def impedance_limits(spec: Spec | None) -> dict[str, tuple[float | None, float | None]]:
    """The spec's (lowest, highest) allowed value of each terminal impedance (None: open)."""
    if spec is None:
        return {"z_in": (None, None), "z_out": (None, None)}
    r = spec.require
    z_in_lo = float(r.z_in) if r.z_in > 0 else None
    z_in_hi = getattr(r, "z_in_max", None)
    z_out_hi = float(r.z_out) if r.z_out is not None else None
    z_out_lo = getattr(r, "z_out_min", None)
    return {"z_in": (z_in_lo, z_in_hi), "z_out": (z_out_lo, z_out_hi)}


def impedance_figure(analysis: Analysis, spec: Spec | None = None) -> Figure:
    """|Z_in| (load in place) and |Z_out| (source in place), each on its own panel with
    only its own limits shaded, so neither curve runs through the other's region."""
    import matplotlib

    with matplotlib.rc_context(_STYLE):
        data = impedance_data(analysis, spec)
        f = data["f"]
        fig = _new_figure(8.6, 7.0)
        gs = fig.add_gridspec(2, 1, hspace=0.12)
        axes = (fig.add_subplot(gs[0]),)
        axes = (axes[0], fig.add_subplot(gs[1], sharex=axes[0]))
        band = _band(analysis, spec)
        limits = impedance_limits(spec)
        panels = (("z_in", "Z_in", "|Z_in|, load in place", BLUE, (0, ()), analysis.z_in),
                  ("z_out", "Z_out", "|Z_out|, source in place", ORANGE, (0, (7, 3)),
                   analysis.z_out))
        for ax, (key, name, label, colour, style, value) in zip(axes, panels, strict=True):
            z = data[key]
            lo_lim, hi_lim = limits[key]
            lo = min([float(z.min())] + [x for x in (lo_lim, hi_lim) if x is not None])
            hi = max([float(z.max())] + [x for x in (lo_lim, hi_lim) if x is not None])
            if band is not None:
                if lo_lim is not None:
                    _forbidden(ax, band[0], band[1], 1e-30, lo_lim,
                               f"{name} below {eng_label(lo_lim, 'Ω')} (judged at midband)",
                               colour=MASK, edge=lo_lim)
                if hi_lim is not None:
                    _forbidden(ax, band[0], band[1], hi_lim, 1e30,
                               f"{name} above {eng_label(hi_lim, 'Ω')} (judged at midband)",
                               colour=MASK, edge=hi_lim)
            _band_lines(ax, band, label=True)
            ax.loglog(f, z, color=colour, linewidth=2.0, linestyle=style, zorder=3, label=label)
            ax.plot([analysis.midband], [value], marker="o", markersize=6.5,
                    markerfacecolor="white", markeredgecolor=colour, markeredgewidth=1.6,
                    linestyle="none", zorder=5)
            ax.annotate(f"{name} = {eng_label(value, 'Ω')}", xy=(analysis.midband, value),
                        xytext=(10, 10), textcoords="offset points", ha="left", va="bottom",
                        fontsize=9.5, color=INK, bbox=_label_box(), zorder=6)
            ax.set_xlim(f[0], f[-1])
            ax.set_ylim(lo / 4.0, hi * 8.0)
            _eng_log_axis(ax.xaxis, "Hz", math.log10(f[-1] / f[0]))
            _eng_log_axis(ax.yaxis, "Ω", math.log10(32.0 * hi / lo))
            _grid(ax)
            ax.set_ylabel(f"|{name}|  (Ω)")
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False,
                      fontsize=8.5, handlelength=2.2)
        axes[0].tick_params(labelbottom=False)
        axes[1].set_xlabel("frequency  (Hz)")
        axes[0].set_title(f"Terminal impedances (values at midband "
                          f"{eng_label(analysis.midband, 'Hz')})", loc="left")
        fig.subplots_adjust(left=0.1, right=0.66, top=0.94, bottom=0.09)
    return fig


# ---------------------------------------------------------------------------
# Saving
# ---------------------------------------------------------------------------
def figure_svg(fig: Figure) -> bytes:
    """The figure as a standalone SVG document (no timestamp, stable ids)."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context(_STYLE):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    return buf.getvalue()


def figure_png(fig: Figure, dpi: int = 150) -> bytes:
    """The figure as a PNG raster at `dpi`."""
    import matplotlib

    buf = io.BytesIO()
    with matplotlib.rc_context(_STYLE):
        fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


_HIST_PANELS = (
    ("gain_db", "gain", "dB"),
    ("f_low", "f_low", "Hz"),
    ("f_high", "f_high", "Hz"),
    ("swing_vpp", "swing", "Vpp"),
)
_HIST_BINS = (12, 40)  # fewest and most bins a panel gets


def histogram_bins(vals: np.ndarray) -> np.ndarray:
    """Bin edges over the data's own span (Freedman–Diaconis width, numpy's "fd"), kept
    between 12 and 40 bins, so a narrow spread shows its shape wherever the limits lie."""
    lo, hi = float(vals.min()), float(vals.max())
    if not hi > lo:
        width = abs(lo) * 1e-3 or 1e-3
        return np.linspace(lo - 6 * width, hi + 6 * width, _HIST_BINS[0] + 1)
    n = len(np.histogram_bin_edges(vals, bins="fd")) - 1
    n = int(min(max(n, _HIST_BINS[0]), _HIST_BINS[1]))
    pad = (hi - lo) / n / 2
    return np.linspace(lo - pad, hi + pad, n + 1)


def _tick_formatter(unit: str):
    """Tick labels in engineering notation with as many digits as the tick spacing needs
    (neighbouring ticks never print the same text)."""
    from matplotlib.ticker import Formatter

    class _Eng(Formatter):
        def _text(self, v: float, digits: int) -> str:
            if unit == "dB":
                return _num(v, f".{max(0, digits - 2)}f")
            text = format_quantity(v, "V" if unit == "Vpp" else unit, digits=digits)
            return text + ("pp" if unit == "Vpp" else "")

        def format_ticks(self, values):
            locs = np.asarray(values, dtype=float)
            step = float(np.min(np.abs(np.diff(locs)))) if locs.size > 1 else 0.0
            big = float(np.max(np.abs(locs))) if locs.size else 1.0
            digits = (int(min(max(math.ceil(math.log10(big / step)) + 1, 2), 7))
                      if step > 0 and big > 0 else 3)
            return [self._text(v, digits) for v in locs]

        def __call__(self, v, pos=None):
            return self._text(v, 4)

    return _Eng()


def histogram_figure(estimate, spec: Spec) -> Figure:
    """Monte Carlo spread of gain, f_low, f_high and swing, with the spec's limits drawn.

    Each unit contributes its value at the worse of the two ambient extremes, so a unit
    is inside every limit drawn here exactly when it passes those requirements. Bins
    follow the data; a limit far from the spread is named at the panel's edge with an
    arrow instead of squeezing the histogram into one bar. No legend sits on the data:
    the limits are named in each panel's title and once below the figure.
    """
    import matplotlib
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.ticker import MaxNLocator

    r = spec.require
    limits = {
        "gain_db": (r.gain_db - r.gain_tolerance_db, r.gain_db + r.gain_tolerance_db),
        "f_low": (None, r.f_low),
        "f_high": (r.f_high, None),
        "swing_vpp": (r.swing_vpp if r.swing_vpp > 0 else None, None),
    }
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(8.6, 6.4)
        axes = fig.subplots(2, 2)
        for ax, (key, title, unit) in zip(axes.ravel(), _HIST_PANELS, strict=True):
            vals = np.asarray(estimate.metrics[key], dtype=float)
            vals = vals[np.isfinite(vals)]
            lo, hi = limits[key]
            named = []
            if vals.size:
                bins = histogram_bins(vals)
                ax.hist(vals, bins=bins, color=BLUE, alpha=0.85, edgecolor="white",
                        linewidth=0.4, zorder=2)
                left, right = float(bins[0]), float(bins[-1])
                span = right - left
                # show a limit in place when it lies within a span of the data
                for x in (lo, hi):
                    if x is not None and left - span <= x <= right + span:
                        left, right = min(left, x - 0.04 * span), max(right, x + 0.04 * span)
                ax.set_xlim(left, right)
                for x, side in ((lo, "min"), (hi, "max")):
                    if x is None:
                        continue
                    named.append(f"{side} {eng_label(x, 'V' if unit == 'Vpp' else unit)}"
                                 + ("pp" if unit == "Vpp" else ""))
                    if left <= x <= right:
                        ax.axvline(x, color=ORANGE, linewidth=1.8, zorder=3)
                    else:
                        at_right = x > right
                        ax.annotate(f"{side} limit {'→' if at_right else '←'}",
                                    xy=(1.0 if at_right else 0.0, 0.93),
                                    xycoords="axes fraction", ha="right" if at_right
                                    else "left", va="top", fontsize=8, color=ORANGE)
            limits_text = (", limits " + ", ".join(named)) if named else ""
            ax.set_title(f"{title} at the worse ambient{limits_text}", fontsize=9.5,
                         color=INK, loc="left")
            ax.set_ylabel("units (count)", fontsize=9)
            ax.set_xlabel(f"{title}  ({unit})", fontsize=9)
            ax.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
            ax.yaxis.set_major_locator(MaxNLocator(nbins=5, integer=True))
            ax.xaxis.set_major_formatter(_tick_formatter(unit))
            ax.tick_params(labelsize=8)
            ax.grid(True, color=GRID_MINOR, linewidth=0.5)
            ax.set_axisbelow(True)
            ax.set_ylim(0, ax.get_ylim()[1] * 1.12)  # headroom for the edge notes
        fig.legend([Patch(facecolor=BLUE, alpha=0.85), Line2D([], [], color=ORANGE,
                                                              linewidth=1.8)],
                   ["simulated units", "spec limit (an arrow: beyond the panel's edge)"],
                   loc="lower center", ncols=2, frameon=False, fontsize=8.5)
        fig.suptitle(
            f"Monte Carlo: {estimate.units} units, {100 * estimate.estimate:.2f} % meet every "
            f"requirement (seed {estimate.seed})", fontsize=10.5, x=0.02, ha="left",
            color=INK)
        fig.subplots_adjust(left=0.08, right=0.98, top=0.89, bottom=0.15, hspace=0.62,
                            wspace=0.22)
    return fig


# ---------------------------------------------------------------------------
# Supply ripple transfer (beside the Bode plot)
# ---------------------------------------------------------------------------
def ripple_data(analysis: Analysis, spec: Spec | None = None) -> dict[str, np.ndarray]:
    """The engine's ripple sweep: frequency (Hz) and |v_load / v_supply| (dB), nominal."""
    from stagesynth.engine.supply import ripple_transfer

    lo, hi = plot_range(analysis, spec)
    f = sweep(min(lo, 1.0), hi)
    h = ripple_transfer(analysis.system, f)[0]
    return {"f": f, "ripple_db": 20.0 * np.log10(np.maximum(h, 1e-300))}


def ripple_figure(analysis: Analysis, spec: Spec | None = None) -> Figure:
    """|v_load / v_supply| against frequency, the ripple frequency and the spec's limit."""
    import matplotlib

    with matplotlib.rc_context(_STYLE):
        data = ripple_data(analysis, spec)
        f, db = data["f"], data["ripple_db"]
        fig = _new_figure(8.6, 4.6)
        ax = fig.add_subplot(1, 1, 1)
        at = analysis.environment.ripple_at
        top = max(float(db.max()), 0.0) + 6.0
        bottom = max(float(db.min()), float(db.max()) - 80.0) - 6.0
        if spec is not None and spec.require.supply_rejection_db is not None:
            lim = -spec.require.supply_rejection_db
            bottom = min(bottom, lim - 10.0)
            _forbidden(ax, at / 1.25, at * 1.25, lim, top + 100.0,
                       f"ripple above −{_num(spec.require.supply_rejection_db, '.0f')} dB "
                       f"at {eng_label(at, 'Hz')}")
        _band_lines(ax, _band(analysis, spec), label=True)
        ax.semilogx(f, db, color=ORANGE, linewidth=2.0, zorder=3,
                    label="|v_load / v_supply|, nominal (signal source at zero)")
        rej = analysis.nominal.supply_rejection
        if math.isfinite(rej):
            ax.plot([at], [-rej], marker="o", markersize=7, markerfacecolor="white",
                    markeredgecolor=INK, markeredgewidth=1.5, linestyle="none", zorder=5)
            ax.annotate(f"{_num(-rej, '.1f')} dB at {eng_label(at, 'Hz')}", xy=(at, -rej),
                        xytext=(12, 14), textcoords="offset points", fontsize=9.5,
                        color=INK, bbox=_label_box(), zorder=6)
        ax.set_xlim(f[0], f[-1])
        ax.set_ylim(bottom, top)
        _eng_log_axis(ax.xaxis, "Hz", math.log10(f[-1] / f[0]))
        _grid(ax)
        ax.set_xlabel("frequency")
        ax.set_ylabel("ripple transfer  (dB)")
        ax.set_title(f"Supply ripple at the load: rejection {_num(rej, '.1f')} dB at "
                     f"{eng_label(at, 'Hz')}", loc="left")
        handles, labels = ax.get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower center", ncols=2, handlelength=2.6,
                   frameon=False, bbox_to_anchor=(0.5, 0.0))
        fig.subplots_adjust(left=0.1, right=0.97, top=0.92, bottom=0.25)
    return fig
