"""Run review, reading: the stored results of one run and the figures drawn from them.

Every function reads through the app's result cache (or an uncached reader when called
without one, as tests and scripts do), never recomputes order tracking, and returns
figures from :mod:`rundash.figures`.
"""

from __future__ import annotations

import math
import re
from typing import Any

import numpy as np

from rundash import figures
from rundash.conventions import side_of_top
from rundash.errors import RundashError
from rundash.presentation import level_title, model_curves, operating_range

UNIT_SYSTEMS = ("metric", "imperial")
PHASE_DISPLAYS = ("unwrapped", "wrapped")


# ----------------------------------------------------------------------------- reading
def result_source(db, cache):
    """The app's cache, or an uncached reader (tests and scripts call without one)."""
    from rundash.dashboard.cache import ResultCache

    return cache if cache is not None else ResultCache(db, maxsize=0)


def load_context(db, run_id: int, *, cache=None) -> dict[str, Any]:
    """Everything the page header and verdict need: run, machine, processing, channels,
    probes, findings and the cache key of the run's processing."""
    return result_source(db, cache).context(run_id)


def operating_of(machine) -> dict[str, float | None]:
    """N_min, N_mc and trip speed of a stored machine."""
    return operating_range(machine.spec)


def criticals_of(findings, probe: str | None = None) -> list[dict[str, Any]]:
    cs = list((findings or {}).get("criticals") or [])
    return [c for c in cs if probe is None or c.get("probe") == probe]


def vector_traces(db, run_id: int, probe: str, orders, compensated: bool, *, cache=None,
                  ctx=None) -> tuple[list[dict[str, Any]], str]:
    """Stored tracks of one probe, cut into run-direction pieces; and the probe's kind.

    Pieces follow :func:`rundash.figures.split_by_direction` (short segments drawn with
    their neighbour); the figures join the pieces of one direction into one trace.
    """
    src = result_source(db, cache)
    ctx = ctx or src.context(run_id)
    proc = ctx["processing"]
    segments = proc.segments if proc is not None else []
    kind = next((c.kind for c in ctx["channels"] if c.probe_name == probe), None)
    out = []
    for order in sorted({float(o) for o in orders} | {1.0}):
        tracks = src.tracks(ctx["key"], probe, order)
        if not tracks:
            continue
        kind = tracks[0].kind
        use_comp = bool(compensated) and any(t.compensated for t in tracks)
        t = next((t for t in tracks if t.compensated == use_comp), None)
        if t is None:
            continue
        out.extend(figures.track_pieces(t, segments, probe=probe, order=order))
    return out, kind or "proximity"


def _uirev(run_id, system, extra=""):
    return f"run-{run_id}-{system}{extra}"


def _vector_setup(db, run_id, probe, orders, compensation, system, cache):
    src = result_source(db, cache)
    ctx = src.context(run_id)
    traces, kind = vector_traces(db, run_id, probe, orders, compensation == "compensated",
                                 cache=src, ctx=ctx)
    has_comp = any(t.get("compensated") for t in traces)
    spec = ctx["machine"].spec
    rpm_max = max([float(np.max(t["speed_rpm"])) for t in traces] or
                  [spec.max_continuous_speed_rpm])
    try:
        limits = src.guidance_lines(ctx["key"], spec.profile, kind=kind,
                                    max_continuous_speed_rpm=spec.max_continuous_speed_rpm,
                                    speed_range_rpm=(0.0, round(rpm_max, -1)))
    except RundashError:
        limits = []
    comp_word = "slow-roll compensated" if has_comp else "uncompensated"
    return ctx, traces, kind, comp_word, has_comp, limits


def pair_partner(probes, probe: str) -> str | None:
    """The other probe of ``probe``'s X/Y pair at its bearing (the description's ``pair``,
    either way round), or None."""
    by = {p.name: p for p in probes}
    me = by.get(probe)
    if me is not None and me.pair in by:
        return me.pair
    return next((p.name for p in probes if p.pair == probe), None)


def bode_figure(db, run_id: int, probe: str, orders, compensation: str, system: str,
                phase: str = "unwrapped", *, cache=None, with_pair: bool = False):
    """The Bode plot of one probe (orders chosen, 1X always), phase unwrapped or wrapped;
    with ``with_pair`` the 1X of the other probe of its X/Y pair on the same axes (its own
    colour), so that X and Y of one bearing can be compared directly."""
    ctx, traces, kind, comp_word, has_comp, limits = _vector_setup(
        db, run_id, probe, orders, compensation, system, cache)
    partner = pair_partner(ctx["probes"], probe) if with_pair else None
    crit = criticals_of(ctx["findings"], probe)
    title = f"Bode plot, {probe} ({comp_word})"
    if partner is not None:
        more, _ = vector_traces(db, run_id, partner, [1.0], compensation == "compensated",
                                cache=result_source(db, cache), ctx=ctx)
        traces = traces + more
        crit = crit + criticals_of(ctx["findings"], partner)
        title = f"Bode plot, {probe} and {partner} 1X ({comp_word})"
    return figures.bode(traces, kind=kind, system=system, criticals=crit,
        operating=operating_of(ctx["machine"]), limit_lines=limits,
        compensated=has_comp, phase=phase if phase in PHASE_DISPLAYS else "unwrapped",
        uirevision=_uirev(run_id, system), title=title,
        model=model_curves(ctx["findings"], probe, kind=kind, compensated=has_comp))


def polar_direct_figures(db, run_id: int, probe: str, compensation: str, system: str, *,
                         cache=None):
    """The polar plot (1X) and the direct-versus-1X plot of one probe."""
    ctx, traces, kind, comp_word, _, limits = _vector_setup(
        db, run_id, probe, [1.0], compensation, system, cache)
    spec = ctx["machine"].spec
    crit = criticals_of(ctx["findings"], probe)
    uirev = _uirev(run_id, system)
    polar = figures.polar(traces, kind=kind, system=system, rotation=spec.rotation,
                          criticals=crit, uirevision=uirev,
                          title=f"Polar plot, {probe} 1X ({comp_word})",
                          model=model_curves(ctx["findings"], probe, kind=kind,
                                             compensated=any(t.get("compensated")
                                                             for t in traces)))
    direct = figures.direct_vs_filtered(
        traces, kind=kind, system=system, limit_lines=limits,
        operating=operating_of(ctx["machine"]), uirevision=uirev,
        title=f"{level_title(ctx['findings'], probe)} beside 1X, {probe}")
    return polar, direct


def vector_figures(db, run_id: int, probe: str, orders, compensation: str, system: str,
                   phase: str = "unwrapped", *, cache=None):
    """Bode, polar and direct-versus-1X figures for one probe."""
    src = result_source(db, cache)
    if cache is None:  # one call reads each track once
        from rundash.dashboard.cache import ResultCache

        src = ResultCache(db, maxsize=16)
    bode = bode_figure(db, run_id, probe, orders, compensation, system, phase, cache=src)
    polar, direct = polar_direct_figures(db, run_id, probe, compensation, system, cache=src)
    return bode, polar, direct


def speed_figure(db, run_id: int, probe: str | None = None, *, cache=None):
    """Speed versus time with the critical bands of ``probe`` (all probes when None)."""
    src = result_source(db, cache)
    ctx = src.context(run_id)
    prof = src.speed_profile(ctx["key"])
    t, n = prof if prof is not None else (np.zeros(0), np.zeros(0))
    crit = criticals_of(ctx["findings"], probe)
    return figures.speed_time(t, n, criticals=crit, operating=operating_of(ctx["machine"]),
                              uirevision=f"run-{run_id}")


def cascade_figure(db, run_id: int, probe: str, system: str, *, cache=None):
    src = result_source(db, cache)
    ctx = src.context(run_id)
    c = src.cascade(ctx["key"], probe)
    if c is None:
        return empty_figure(f"No cascade stored for {probe}")
    proc = ctx["processing"]
    kind = next((ch.kind for ch in ctx["channels"] if ch.probe_name == probe), "proximity")
    orders = tuple((proc.params or {}).get("orders") or (1, 2, 3, 4)) if proc else (1, 2, 3, 4)
    return figures.cascade(c.speed_rpm, c.freq_hz, c.amplitude, kind=kind, system=system,
                           orders=orders, probe=probe, uirevision=_uirev(run_id, system, probe),
                           title=f"Cascade of spectra versus speed, {probe}")


def parse_frequencies(text: str | None) -> tuple[list[float], str]:
    """Natural frequencies in Hz from free text ('41.5, 96'); and a note on what was dropped."""
    if not text or not text.strip():
        return [], ""
    out, bad = [], []
    for part in re.split(r"[,;\s]+", text.strip()):
        if not part:
            continue
        try:
            v = float(part)
        except ValueError:
            bad.append(part)
            continue
        if math.isfinite(v) and v > 0:
            out.append(v)
        else:
            bad.append(part)
    note = (f"Ignored {', '.join(repr(b) for b in bad)}: enter positive numbers in Hz, "
            "separated by commas." if bad else "")
    return out, note


def campbell_figure(db, run_id: int, natural_text: str | None, *, cache=None):
    src = result_source(db, cache)
    ctx = src.context(run_id)
    prof = src.speed_profile(ctx["key"])
    top = float(np.max(prof[1])) if prof is not None and prof[1].size else \
        ctx["machine"].spec.max_continuous_speed_rpm
    proc = ctx["processing"]
    orders = tuple((proc.params or {}).get("orders") or (1, 2, 3, 4)) if proc else (1, 2, 3, 4)
    freqs, note = parse_frequencies(natural_text)
    fig = figures.campbell(max(top, ctx["machine"].spec.trip_speed_rpm or 0.0), orders=orders,
                           criticals=criticals_of(ctx["findings"]), natural_frequencies_hz=freqs,
                           operating=operating_of(ctx["machine"]), uirevision=f"run-{run_id}")
    return fig, note


def orbit_pairs(probes) -> list[tuple[str, str]]:
    """(X probe, Y probe) pairs named by the machine description, X first."""
    names = {p.name: p for p in probes}
    pairs = []
    for p in probes:
        if p.pair and p.pair in names and p.axis == "X":
            pairs.append((p.name, p.pair))
    for p in probes:  # pairs whose axes are not marked X/Y
        if p.pair and p.pair in names and p.axis not in ("X", "Y") and \
                (p.pair, p.name) not in pairs and (p.name, p.pair) not in pairs:
            pairs.append((p.name, p.pair))
    return pairs


def orbit_figure(db, run_id: int, pair: str | None, speed_rpm, direction: str | None,
                 system: str, *, cache=None):
    """Orbit of an X/Y pair at the revolution nearest the chosen speed (and direction).

    The filtered orbit uses the uncompensated 1X vectors of that revolution, the unfiltered
    one the raw samples between its two once-per-rev events (mean removed); probe
    mounting angles are applied by :func:`rundash.figures.orbit`.
    """
    from rundash.storage import queries as q

    src = result_source(db, cache)
    ctx = src.context(run_id)
    pairs = orbit_pairs(ctx["probes"])
    if not pairs:
        return empty_figure("No X/Y probe pair in this machine's description"), \
            "The machine description names no probe pairs."
    xname, yname = next((p for p in pairs if "|".join(p) == pair), pairs[0])
    probes = {p.name: p for p in ctx["probes"]}
    chans = {c.probe_name: c for c in ctx["channels"] if c.role == "probe"}
    key = ctx["key"]
    opr = src.tach(key) if ctx["processing"] is not None else None
    tx = [t for t in src.tracks(key, xname, 1.0) if not t.compensated]
    ty = [t for t in src.tracks(key, yname, 1.0) if not t.compensated]
    if opr is None or not tx or not ty or opr.size < 2:
        return empty_figure("Run not processed: no orbit"), "Process the run first."
    tx, ty = tx[0], ty[0]
    proc = ctx["processing"]
    segs = proc.segments if proc else []
    candidates = np.arange(tx.time_s.size)
    if direction and direction != "any":
        pieces = [idx for d, idx in figures.split_by_direction(tx.time_s, segs)
                  if d == direction]
        if pieces:
            candidates = np.concatenate(pieces)
    target = float(speed_rpm) if speed_rpm not in (None, "") else \
        float(ctx["machine"].spec.max_continuous_speed_rpm)
    i = int(candidates[np.argmin(np.abs(tx.speed_rpm[candidates] - target))])
    t_mid = float(tx.time_s[i])
    k = int(np.clip(np.searchsorted(opr, t_mid) - 1, 0, opr.size - 2))
    cx, cy = chans[xname], chans[yname]
    fs = cx.sample_rate_hz
    i0, i1 = int(round(opr[k] * fs)), int(round(opr[k + 1] * fs))
    with db.read() as conn:
        raw_x = q.read_channel(conn, cx.id, i0, i1 + 1)
        raw_y = q.read_channel(conn, cy.id, i0, i1 + 1)
    px, py = probes[xname], probes[yname]
    machine = ctx["machine"]
    rotation = machine.spec.rotation
    tach_deg = float(machine.tach.angle_deg or 0.0) if machine.tach else 0.0
    fig = figures.orbit(
        {"name": xname, "angle_deg": px.angle_deg, "amplitude": tx.amplitude[i],
         "phase_lag_deg": tx.phase_lag_deg[i]},
        {"name": yname, "angle_deg": py.angle_deg, "amplitude": ty.amplitude[i],
         "phase_lag_deg": ty.phase_lag_deg[i]},
        kind=cx.kind or "proximity", system=system, rotation=rotation,
        speed_rpm=float(tx.speed_rpm[i]), raw_x=raw_x, raw_y=raw_y, tach_angle_deg=tach_deg)
    note = (f"Revolution {k + 1} at t = {opr[k]:.2f}–{opr[k + 1]:.2f} s, "
            f"{tx.speed_rpm[i]:.0f} rpm (nearest to {target:.0f} rpm); mounting angles "
            f"{xname} {mount_text(px.angle_deg, tach_deg, rotation)}, "
            f"{yname} {mount_text(py.angle_deg, tach_deg, rotation)} applied, once-per-rev "
            f"sensor at {side_of_top(tach_deg, rotation)}; filtered 1X uncompensated.")
    return fig, note


def mount_text(angle_deg: float, tach_angle_deg: float, rotation: str) -> str:
    """A probe's mounting angle in both forms: ``'45° L (315° from the once-per-rev
    sensor)'`` — left or right of top dead centre viewed from the driver end, and the
    number the machine description stores."""
    return (f"{side_of_top(tach_angle_deg + angle_deg, rotation)} ({angle_deg:g}° from the "
            "once-per-rev sensor)")


def empty_figure(message: str):
    import plotly.graph_objects as go

    fig = go.Figure()
    fig.update_layout(template="simple_white", height=300,
                      annotations=[{"text": message, "showarrow": False, "xref": "paper",
                                    "yref": "paper", "x": 0.5, "y": 0.5, "font": {"size": 14}}],
                      xaxis={"visible": False}, yaxis={"visible": False})
    return fig
