"""Analysis of rundash: critical speeds, amplification factors, guidance profiles, limits.

Pure numpy/scipy, no I/O; inputs are 1X speed/phasor arrays (see :mod:`rundash.conventions`).
Every verdict is advisory and carries :data:`rundash.CAUTION`.

Amplification factors (:mod:`rundash.analysis.amplification`)
    half_power          -- API 684 half-power bandwidth AF of one peak, never extrapolated
    HalfPower           -- its result (af, n1_rpm, n2_rpm, nc_rpm, determinable, reason)
    phase_af            -- phase-slope and 45/135-degree AF cross-checks
    PhaseAF             -- its result
    fit_modes           -- least-squares modal fit of the complex 1X response
    ModalFit, Mode      -- its result; Mode.af = 1/(2 zeta) with uncertainties

Critical speeds (:mod:`rundash.analysis.criticals`)
    find_criticals      -- peaks confirmed by phase, phase-only criticals, AF, sweep rate
    Critical            -- one critical with classification, confidence and evidence
    combine_bearing     -- agreement of the X and Y probes of one bearing
    compare_directions  -- run-up against coast-down
    CriticalPair        -- a matched pair and its differences

Sweep-rate-free criticals (:mod:`rundash.analysis.transient`)
    identify_modes      -- one modal model per run from the quasi-steady readings: clusters,
                           model order, joint fit, bootstrap, run-direction refits
    fit_transient       -- unbalance modes shared by every probe, fitted through the
                           measured speed history (variable projection)
    mode_response       -- the 1X vectors order tracking reads from one mode along a sweep
    unbalance_half_power_af, unbalance_peak_ratio -- SDOF closed forms
    RunModes, Cluster, TransientFit, TransientMode, ProbeReading -- results

X/Y pairs (:mod:`rundash.analysis.whirl`)
    orbit               -- forward/backward whirl components and ellipse axes of a pair
    mode_direction      -- direction, ellipticity and whirl of a fitted mode at a bearing
    major_axis_readings -- peaks and half-power AF of a fitted model's major-axis response
    pair_shape_hint     -- cylindrical/conical hint from a mode's orbits at two bearings

Mode-shape hints (:mod:`rundash.analysis.modes`)
    mode_hint           -- cylindrical / conical / unclear from the lags at two bearings
    ModeHint            -- its result

Guidance profiles (:mod:`rundash.analysis.profiles`; files in ``profiles/*.toml`` are
read by :func:`rundash.ingest.profile_file.load_profile`)
    required_margin_pct -- margin a critical needs below N_min or above N_mc
    Profile             -- a loaded profile (rules carry document, edition, clause, confidence)
    as_profile          -- the profile itself, or a clear error for anything else

Reference zones (:mod:`rundash.analysis.zones`): ISO shaft displacement and bearing
velocity zone tables (from memory)

Limits (:mod:`rundash.analysis.limits`)
    check_levels        -- highest direct/1X level per critical band and at top speed
    LevelCheck          -- one level against one limit or zone table
    shaft_zone_boundaries_um_pp, velocity_zone_boundaries_mm_s, zone_of

Verdicts (:mod:`rundash.analysis.verdicts`)
    judge               -- separation-margin verdict of each critical
    summarize           -- run summary (RunVerdict) with to_json_dict()
    MarginVerdict, RunVerdict
"""

from rundash.analysis.amplification import (
    HalfPower,
    ModalFit,
    Mode,
    PhaseAF,
    fit_modes,
    half_power,
    phase_af,
)
from rundash.analysis.criticals import (
    Critical,
    CriticalPair,
    combine_bearing,
    compare_directions,
    find_criticals,
)
from rundash.analysis.limits import (
    LevelCheck,
    check_levels,
    shaft_zone_boundaries_um_pp,
    velocity_zone_boundaries_mm_s,
    zone_of,
)
from rundash.analysis.modes import ModeHint, mode_hint
from rundash.analysis.profiles import Profile, as_profile, required_margin_pct
from rundash.analysis.verdicts import MarginVerdict, RunVerdict, judge, summarize

__all__ = [
    "Critical", "CriticalPair", "HalfPower", "LevelCheck", "MarginVerdict", "ModalFit", "Mode",
    "ModeHint", "PhaseAF", "Profile", "RunVerdict", "check_levels", "combine_bearing",
    "compare_directions", "find_criticals", "fit_modes", "half_power", "judge", "as_profile",
    "mode_hint", "phase_af", "required_margin_pct", "shaft_zone_boundaries_um_pp",
    "summarize", "velocity_zone_boundaries_mm_s", "zone_of",
]
