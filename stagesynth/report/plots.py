"""Bode, impedance and supply-ripple figures of an analysed stage, from the engine's sweeps.

Every curve is an `AcSystem` sweep of the nominal stage; every limit line comes from
the spec. matplotlib is imported inside the functions (it is heavy) and figures are
drawn on the Agg canvas without touching pyplot's global state. The shared look and the
SVG/PNG writing are in `plotstyle`, the Monte Carlo histograms in `histograms`.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from stagesynth.report.histograms import histogram_bins, histogram_figure
from stagesynth.report.plotstyle import (
    _STYLE,
    BAND,
    BLUE,
    GRID_MAJOR,
    GRID_MINOR,
    INK,
    MASK,
    ORANGE,
    _band_lines,
    _eng_log_axis,
    _forbidden,
    _grid,
    _label_box,
    _new_figure,
    _num,
    eng_label,
    figure_png,
    figure_svg,
)

if TYPE_CHECKING:  # pragma: no cover - typing only
    from matplotlib.figure import Figure

    from stagesynth.contracts.spec import Spec
    from stagesynth.engine.analysis import Analysis

# the shared look and the histograms stay importable from here
__all__ = [
    "BAND",
    "BLUE",
    "GRID_MAJOR",
    "GRID_MINOR",
    "INK",
    "MASK",
    "ORANGE",
    "_STYLE",
    "_band_lines",
    "_eng_log_axis",
    "_forbidden",
    "_grid",
    "_label_box",
    "_new_figure",
    "_num",
    "bode_data",
    "bode_figure",
    "eng_label",
    "figure_png",
    "figure_svg",
    "histogram_bins",
    "histogram_figure",
    "impedance_data",
    "impedance_figure",
    "impedance_limits",
    "plot_range",
    "ripple_data",
    "ripple_figure",
    "sweep",
]

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
