"""Pure figure builders: stored results (arrays and plain dicts) in, plotly Figures out.

Nothing here reads the database or knows Dash; the dashboard and the report call these
functions, and tests check them through ``fig.to_dict()``.

Public functions, by figure family (module)
------------------------------------------
``bode``: bode      amplitude and phase lag versus speed, criticals, bands and zones
``bode``: polar     the nX vector as a curve in the complex plane, speed labels, criticals
``speed``: speed_time  speed versus time with the time spent inside each critical band
``levels``: direct_vs_filtered  unfiltered level beside the 1X amplitude, with limit lines
``levels``: guidance_lines  limit lines and reference zones of a profile for one probe kind
``cascade``: cascade  spectra versus speed as a colour map, with order lines
``cascade``: campbell  interference diagram: order lines, criticals, natural frequencies
``orbit``: orbit    filtered 1X and unfiltered orbit of an X/Y pair, whirl direction
``orbit``: whirl_direction  forward or reverse whirl of an orbit
``orbit``: bearing_modes  split view of a bearing: the fitted model's major-axis response and its modes' directions
``comparison``: comparison_trend  critical speed and AF per run against date, cycles
``live``: live_bode_polar  the live monitor's Bode and polar figures
``segments``: split_by_direction  cut a track into run-up / coast-down / hold pieces
``segments``: track_pieces  a stored track as trace dicts, one per direction
``segments``: drawing_segments  the run's segments as drawn: blips folded in
``segments``: time_in_band  seconds a speed history spends inside a speed band
``common``: decimate_minmax  display indices keeping each speed bin's extremes
``common``: unwrap_phase_deg  phase lag made continuous along a track, for display only
``common``: margin_zones  speed zones a critical should stay out of

Conventions (see :mod:`rundash.conventions`): speeds in rpm, times in s from the record's
start, phase lag in degrees 0..360. Amplitudes are passed in storage units (um p-p for
proximity 1X, mm/s pk for velocity 1X; direct: um p-p or mm/s rms) with the transducer
``kind``; the display ``system`` ("metric" or "imperial") is applied here through
:func:`rundash.units.to_display` only.

Colours are the Okabe-Ito colour-blind-safe set (M. Okabe and K. Ito, "Color Universal
Design (CUD): how to make figures and presentations that are friendly to colorblind
people", J*FLY, 2008); run direction is carried by line dash and marker shape as well as
by the legend, never by colour alone.
"""

from rundash.figures.bode import bode, polar
from rundash.figures.cascade import campbell, cascade
from rundash.figures.common import (
    DIRECTION_STYLE, PALETTE, decimate_minmax, margin_zones, unwrap_phase_deg,
)
from rundash.figures.comparison import comparison_trend
from rundash.figures.levels import direct_vs_filtered, guidance_lines
from rundash.figures.live import live_bode_polar
from rundash.figures.orbit import bearing_modes, orbit, whirl_direction
from rundash.figures.segments import (
    drawing_segments, split_by_direction, time_in_band, track_pieces,
)
from rundash.figures.speed import speed_time

__all__ = [
    "bode", "polar", "speed_time", "direct_vs_filtered", "guidance_lines", "cascade",
    "campbell", "orbit", "whirl_direction", "bearing_modes", "comparison_trend", "live_bode_polar",
    "split_by_direction", "track_pieces", "drawing_segments", "time_in_band", "decimate_minmax",
    "unwrap_phase_deg", "margin_zones", "PALETTE", "DIRECTION_STYLE",
]
