"""Band-limited overall velocity: the broad-band rms the housing-velocity zones judge.

ISO 10816-1 / 20816-1 define the housing vibration severity as the broad-band rms
velocity over 10–1000 Hz, and over 2–1000 Hz for machines whose rated speed is below
600 rpm (from memory: the band and the 600 rpm boundary are not checked against the
standard's text; ISO 10816-3 and 10816-7 refer to the same band). A velocity channel as
recorded carries DC (an offset of the conditioning) and content outside that band, which
the rms as recorded counts; this module removes them before the rms.

The filter: a Butterworth band-pass (``BAND_ORDER`` poles on each side, -3 dB at the
band edges: common practice for monitoring filters, no source; ISO 2954's tolerance of
the instrument's response is not checked), as second-order sections run by
:func:`scipy.signal.sosfilt` with its state carried from one chunk to the next, so a
record fed in chunks is filtered exactly as in one call. The state starts in the steady
state of the first sample held since ever (:func:`scipy.signal.sosfilt_zi` scaled by
it): a DC offset does not ring the filter at the record's start.

Where the record's Nyquist frequency ``fs / 2`` lies below the upper edge (more exactly,
where the edge passes ``NYQUIST_FRACTION`` of it, where a bilinear-transform low-pass
no longer has its shape), no low-pass is applied: the recording itself holds nothing
above ``fs / 2``, so the band in effect is ``lo–fs/2`` and the overall misses what lies
between ``fs / 2`` and the nominal upper edge; :attr:`OverallBand.note` says so. Where
even the lower edge cannot be honoured, no band is applied and the note says that the
overall is the rms as recorded.

The per-revolution rms is taken over the samples of each block of revolutions exactly as
the order tracker takes its direct level (:func:`rundash.dsp.orders.first_samples`), so
the band-limited overall lines up with the tracker's blocks by block index.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rundash.dsp.orders import first_samples
from rundash.dsp.speed import SpeedProfile
from rundash.errors import DspError, invalid_value

__all__ = ["OverallBand", "velocity_band", "band_sos", "BandOverall", "ISO_BAND_HZ"]

#: The broad-band velocity band of ISO 10816-1 / 20816-1, Hz (from memory).
ISO_BAND_HZ = (10.0, 1000.0)
#: The lower edge for slow machines and the rated speed below which it applies
#: (ISO 10816-1 / 20816-1, from memory).
SLOW_LOW_HZ = 2.0
SLOW_BELOW_RPM = 600.0
#: Butterworth poles on each side of the band (common practice, no source).
BAND_ORDER = 4
#: An edge above this fraction of the Nyquist frequency is not applied (our own choice).
NYQUIST_FRACTION = 0.9


@dataclass(frozen=True)
class OverallBand:
    """The band of the overall velocity of one record.

    Attributes
    ----------
    nominal_hz : (float, float)
        The standard's band for this machine, Hz.
    lo_hz, hi_hz : float
        The band in effect: ``hi_hz`` is the nominal upper edge, or the record's
        Nyquist frequency ``fs / 2`` when that lies below it.
    applied : bool
        False when the sample rate is too low for even the lower edge: the overall is
        then the rms as recorded.
    low_pass : bool
        Whether a low-pass edge is applied (False when ``fs / 2`` limits the band).
    basis : str
        Why this band (the standard and the machine's rated speed).
    note : str or None
        The band's reach beyond the sample rate, said; None when the band is whole.
    """

    nominal_hz: tuple[float, float]
    lo_hz: float
    hi_hz: float
    applied: bool
    low_pass: bool
    basis: str
    note: str | None = None

    def label(self) -> str:
        """'10-1000 Hz' (ASCII, as stored texts are), or 'as recorded'."""
        if not self.applied:
            return "as recorded (no band)"
        return f"{_hz(self.lo_hz)}-{_hz(self.hi_hz)} Hz"

    def to_json_dict(self) -> dict:
        return {"nominal_hz": list(self.nominal_hz), "lo_hz": self.lo_hz, "hi_hz": self.hi_hz,
                "applied": self.applied, "low_pass": self.low_pass, "label": self.label(),
                "basis": self.basis, "note": self.note}


def _hz(x: float) -> str:
    return f"{x:.0f}" if abs(x - round(x)) < 0.05 else f"{x:.1f}"


def velocity_band(fs: float, *, rated_speed_rpm: float) -> OverallBand:
    """The overall velocity band of a record sampled at ``fs`` Hz on a machine rated
    ``rated_speed_rpm``.

    >>> velocity_band(25600.0, rated_speed_rpm=3600.0).label()
    '10-1000 Hz'
    >>> velocity_band(25600.0, rated_speed_rpm=450.0).label()
    '2-1000 Hz'
    >>> b = velocity_band(1500.0, rated_speed_rpm=3600.0)
    >>> b.label(), b.low_pass
    ('10-750 Hz', False)
    """
    if not (np.isfinite(fs) and fs > 0):
        raise DspError(invalid_value("fs", fs, "a positive sample rate in Hz"))
    if not (np.isfinite(rated_speed_rpm) and rated_speed_rpm > 0):
        raise DspError(invalid_value("rated_speed_rpm", rated_speed_rpm, "a positive speed in rpm"))
    slow = rated_speed_rpm < SLOW_BELOW_RPM
    lo, hi = (SLOW_LOW_HZ if slow else ISO_BAND_HZ[0]), ISO_BAND_HZ[1]
    basis = (f"ISO 10816-1 / 20816-1 broad-band velocity (from memory): {_hz(lo)}-{_hz(hi)} Hz "
             + (f"for a rated speed below {SLOW_BELOW_RPM:.0f} rpm" if slow else
                f"for a rated speed of {SLOW_BELOW_RPM:.0f} rpm and above")
             + f" (rated {rated_speed_rpm:.0f} rpm)")
    nyq = fs / 2.0
    if lo >= NYQUIST_FRACTION * nyq:
        return OverallBand((lo, hi), lo, nyq, False, False, basis,
                           f"the sample rate {fs:g} Hz is too low for the {_hz(lo)} Hz lower edge: "
                           "the velocity overall is the rms as recorded, not band-limited")
    if hi >= NYQUIST_FRACTION * nyq:
        return OverallBand((lo, hi), lo, nyq, True, False, basis,
                           f"the record holds nothing above fs/2 = {_hz(nyq)} Hz (sampled at "
                           f"{fs:g} Hz): the velocity overall covers {_hz(lo)}-{_hz(nyq)} Hz, "
                           f"content between {_hz(nyq)} and {_hz(hi)} Hz is not in it")
    return OverallBand((lo, hi), lo, hi, True, True, basis)


def band_sos(band: OverallBand, fs: float, *, order: int = BAND_ORDER) -> np.ndarray:
    """Second-order sections of the band's Butterworth filter at ``fs`` Hz (a high-pass
    alone when ``band.low_pass`` is False), shape (n_sections, 6)."""
    if not band.applied:
        raise DspError(invalid_value("band", band.label(), "a band that can be applied"))
    from scipy import signal  # here: scipy.signal is slow to import, few runs need it

    if band.low_pass:
        return signal.butter(order, [band.lo_hz, band.hi_hz], btype="bandpass", fs=fs,
                             output="sos")
    return signal.butter(order, band.lo_hz, btype="highpass", fs=fs, output="sos")


class BandOverall:
    """Band-limited rms per block of whole revolutions, fed chunk by chunk.

    Parameters
    ----------
    band : OverallBand
        From :func:`velocity_band` (``applied`` True).
    profile : SpeedProfile
        The record's speed profile (its once-per-rev events).
    fs : float
        Sample rate in Hz (time = index / fs).
    n_channels : int
        Channels per chunk.
    revs_per_block : int
        Whole revolutions per block, as the order tracker's.

    Notes
    -----
    Block ``j`` holds the samples from the first at or after event ``j R`` up to the
    one before the first at or after event ``(j + 1) R``, as the order tracker's direct
    level: :meth:`rms` of its block indices (``rev_index // R``) lines up with its blocks.
    Memory: two float64 per block and channel.

    Examples
    --------
    >>> from rundash.dsp.speed import speed_profile
    >>> fs = 10000.0
    >>> prof = speed_profile(np.arange(0.0, 4.0, 0.02))  # 3000 rpm
    >>> t = np.arange(int(4.0 * fs)) / fs
    >>> x = 3.0 + 2.0 * np.sin(2 * np.pi * 100.0 * t)  # DC and 100 Hz, 2 mm/s peak
    >>> ov = BandOverall(velocity_band(fs, rated_speed_rpm=3000.0), prof, fs, 1)
    >>> for a in range(0, t.size, 6000):
    ...     ov.feed(x[None, a:a + 6000], a)
    >>> round(float(ov.rms()[0, 100]), 4)  # 2 / sqrt(2): DC removed, 100 Hz kept
    1.4142
    """

    def __init__(self, band: OverallBand, profile: SpeedProfile, fs: float, n_channels: int,
                 *, revs_per_block: int = 1):
        if not isinstance(profile, SpeedProfile):
            raise DspError(invalid_value("profile", type(profile).__name__, "a SpeedProfile"))
        if isinstance(n_channels, bool) or int(n_channels) != n_channels or n_channels < 1:
            raise DspError(invalid_value("n_channels", n_channels, "an integer >= 1"))
        R = int(revs_per_block)
        if R < 1 or R != revs_per_block:
            raise DspError(invalid_value("revs_per_block", revs_per_block, "an integer >= 1"))
        self.band = band
        self.fs = float(fs)
        self.n_channels = int(n_channels)
        self.sos = band_sos(band, self.fs)
        n_blocks = profile.n_revs // R
        # first sample of each block, and the one after the last
        self._starts = first_samples(profile.rev_times_s[0:n_blocks * R + 1:R], self.fs)
        self._sumsq = np.zeros((self.n_channels, n_blocks))
        self._zi: np.ndarray | None = None
        self._next: int | None = None

    def feed(self, block, start_index: int) -> None:
        """Filter a chunk ``block`` (n_channels, n_samples) whose first sample has index
        ``start_index``; chunks must be consecutive."""
        x = np.asarray(block, dtype=np.float64)
        if x.ndim != 2 or x.shape[0] != self.n_channels:
            raise DspError(invalid_value("block", f"array of shape {x.shape}",
                                         f"shape ({self.n_channels}, n_samples)"))
        if self._next is not None and start_index != self._next:
            raise DspError(invalid_value("start_index", start_index,
                                         f"the next sample index {self._next} (chunks "
                                         "must be consecutive)"))
        n = x.shape[1]
        self._next = int(start_index) + n
        if n == 0:
            return
        from scipy import signal

        if self._zi is None:  # the steady state of the first sample held since ever
            self._zi = signal.sosfilt_zi(self.sos)[:, None, :] * x[:, 0][None, :, None]
        y, self._zi = signal.sosfilt(self.sos, x, axis=-1, zi=self._zi)
        st = self._starts
        a, b = int(start_index), int(start_index) + n
        j0 = int(np.searchsorted(st, a, side="right")) - 1  # block of the chunk's first sample
        inner = st[(st > a) & (st < b)] - a
        offs = np.concatenate([[0], inner]).astype(np.int64)
        sums = np.add.reduceat(np.square(y), offs, axis=1)
        js = j0 + np.arange(offs.size)
        ok = (js >= 0) & (js < self._sumsq.shape[1])
        self._sumsq[:, js[ok]] += sums[:, ok]

    def rms(self, block_index=None) -> np.ndarray:
        """Band-limited rms of the blocks ``block_index`` (all when None), shape
        (n_channels, n), in the channel's unit."""
        counts = np.diff(self._starts).astype(np.float64)
        j = np.arange(counts.size) if block_index is None else np.asarray(block_index, np.int64)
        return np.sqrt(self._sumsq[:, j] / counts[j])
