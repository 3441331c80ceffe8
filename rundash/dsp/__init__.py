"""Signal processing of rundash: pure numpy/scipy, no I/O (see :mod:`rundash.conventions`).

Once-per-rev reference (:mod:`rundash.dsp.tach`)
    detect_edges        -- event times of a tach channel's chosen edge, sub-sample
    once_per_rev        -- once-per-rev events with missing/extra pulse repair
    OncePerRev          -- its result
    edge_samples        -- sample intervals a tach edge spans (under 2: quantised)
    timing_jitter       -- rms jitter of once-per-rev events (third differences)
    tach_quality        -- judge the reference, warn (TachQualityWarning)
    TachQuality         -- its result, with the angle bound a fit cannot remove

Speed (:mod:`rundash.dsp.speed`)
    speed_profile       -- smooth cubic angle model from the reference events (fitted
                           through their jitter when they jitter)
    fit_event_times     -- the events fitted through their timing jitter
    SpeedProfile        -- angle_rev(t), rpm(t), time_at_angle(a), t_start, t_end
    segment             -- run-up / coast-down / steady segments
    Segment             -- one segment
    run_kind            -- 'run-up', 'coast-down', 'mixed' or 'steady'

Order tracking (:mod:`rundash.dsp.orders`)
    track_orders        -- nX vectors per block of whole revolutions (computed order tracking)
    OrderTracker        -- the same, fed chunk by chunk
    OrderTrack          -- its result (vectors, direct levels, speed, time)
    concat_tracks       -- join tracks of consecutive chunks

Run directions (:mod:`rundash.dsp.directions`, one definition for judging and drawing)
    direction_segments  -- the stored segments folded: blips belong to their sweep
    split_by_direction  -- a track cut into pieces by them
    direction_masks     -- run-up and coast-down masks with enough blocks to judge

Incremental processing (:mod:`rundash.dsp.incremental`, a record arriving in pieces)
    IncrementalTach     -- once-per-rev events of a tach fed block by block
    IncrementalOrders   -- order tracking of revolutions as they complete

Vold–Kalman filter (:mod:`rundash.dsp.vold_kalman`)
    vold_kalman         -- second-generation multi-order Vold–Kalman envelopes
    vold_kalman_at      -- the same over a long record in overlapping pieces, at given times
    VoldKalmanResult    -- its result

Slow roll (:mod:`rundash.dsp.slowroll`)
    choose_slow_roll_window -- the lowest band where the 1X is steady, below the first
                           candidate critical
    SlowRollChoice      -- its result, with the reason
    auto_slow_roll_window -- a band from the speeds alone (no vectors at hand)
    slow_roll_vector    -- mean vector in a speed band
    compensate          -- subtract it from every block

Spectra (:mod:`rundash.dsp.spectra`)
    cascade             -- spectra per speed step of a channel in memory
    cascade_plan        -- row times and speeds from the speed profile alone
    cascade_rows        -- rows computable from one block of samples (chunked use)
    Cascade             -- its result
"""

from rundash.dsp.directions import direction_masks, direction_segments, split_by_direction
from rundash.dsp.incremental import IncrementalOrders, IncrementalTach
from rundash.dsp.orders import OrderTrack, OrderTracker, concat_tracks, track_orders
from rundash.dsp.slowroll import (
    SlowRollChoice, auto_slow_roll_window, choose_slow_roll_window, compensate, slow_roll_vector,
)
from rundash.dsp.spectra import Cascade, cascade, cascade_plan, cascade_rows
from rundash.dsp.speed import (
    Segment, SpeedProfile, fit_event_times, run_kind, segment, speed_profile,
)
from rundash.dsp.tach import (
    OncePerRev, TachQuality, detect_edges, edge_samples, once_per_rev, tach_quality, timing_jitter,
)
from rundash.dsp.vold_kalman import VoldKalmanResult, vold_kalman, vold_kalman_at

__all__ = [
    "detect_edges", "once_per_rev", "OncePerRev", "edge_samples", "timing_jitter",
    "tach_quality", "TachQuality",
    "speed_profile", "SpeedProfile", "fit_event_times", "segment", "Segment", "run_kind",
    "track_orders", "OrderTracker", "OrderTrack", "concat_tracks",
    "IncrementalTach", "IncrementalOrders",
    "direction_segments", "split_by_direction", "direction_masks",
    "vold_kalman", "vold_kalman_at", "VoldKalmanResult",
    "choose_slow_roll_window", "SlowRollChoice", "auto_slow_roll_window", "slow_roll_vector",
    "compensate",
    "cascade", "cascade_plan", "cascade_rows", "Cascade",
]
