"""The live recorder: a source's blocks become a new run, written while they arrive.

The run is created at once with ``state='incomplete'`` and stays so until the source
ends; then it is marked ``'complete'``. Samples are stored exactly as the importer stores
them (the same channel plan and scales, waveform chunks of
:data:`~rundash.storage.queries.CHUNK_SAMPLES` samples per channel, float32; the last
chunk may be partial). Each full chunk is written in its own short write transaction
(``BEGIN IMMEDIATE``) together with the new channel and run lengths, so a reader never
sees a half-written chunk, and a recorder killed at any moment leaves a valid run of
whole chunks (at most the unwritten part of one chunk, 2.56 s at 25.6 kHz, is lost).
A restarted recorder always starts a new run.

:func:`record` runs the loop; ``on_start`` and ``on_block`` hooks let the pipeline
level (:mod:`rundash.workflows.live`) process the stored values as they arrive.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from datetime import datetime
from typing import Callable

import numpy as np

from rundash.errors import InputError, RundashError
from rundash.ingest.importer import channel_plan
from rundash.ingest.machine_file import check_profile
from rundash.ingest.sources import Source, StreamHeader
from rundash.model import MachineDescription
from rundash.storage import queries as q
from rundash.storage.engine import Database


@dataclass(frozen=True)
class RecordedChannel:
    """A channel the recorder stores: its database id and what it carries."""

    id: int
    name: str
    role: str
    probe_name: str | None
    kind: str | None
    unit: str


@dataclass
class RecordResult:
    run_id: int
    n_samples: int
    state: str
    error: str | None = None
    warnings: list[str] = field(default_factory=list)


class Recorder:
    """Writes one run chunk by chunk. Use :meth:`start`, :meth:`add`, :meth:`finish`."""

    def __init__(self, db: Database, desc: MachineDescription, *, description_text: str = "",
                 label: str = "", cycle: str = "", notes: str = "",
                 started_at: datetime | None = None, source_name: str = "live",
                 chunk_samples: int = q.CHUNK_SAMPLES):
        self.db = db
        self.desc = desc
        self.description_text = description_text
        self.label, self.cycle, self.notes = label, cycle, notes
        self.started_at = started_at
        self.source_name = source_name
        self.chunk_samples = int(chunk_samples)
        self.run_id: int | None = None
        self.channels: list[RecordedChannel] = []
        self.fs = float("nan")
        self.n_stored = 0  # samples per channel in the database
        self.n_received = 0  # samples per channel received (stored + pending)
        self._chunk_index = 0
        self._pending: list[np.ndarray] = []
        self._pending_n = 0
        self._hash = hashlib.sha256()
        self._cols = np.empty(0, np.int64)
        self._scales = np.empty((0, 1))
        self._unit_scale = True
        self.warnings: list[str] = []

    def start(self, header: StreamHeader) -> int:
        """Create the machine (or update it), the run and its channels; return the run id."""
        check_profile(self.desc)
        plan = channel_plan(self.desc, header.channels, self.source_name)
        if header.units:
            for col, role, probe, *_ in plan:
                u = header.units[col]
                ok = ("", "V", "raw") if self.desc.data.signal_units == "V" else \
                    ("", "raw", probe.units if probe else "V")
                if u not in ok and not (role == "tach"):
                    raise InputError(f"{self.source_name}: channel {header.channels[col]!r} "
                                     f"comes in {u!r}; the machine description expects "
                                     f"{'volts' if self.desc.data.signal_units == 'V' else probe.units!r}")
        unused = sorted(set(header.channels) - {header.channels[c] for c, *_ in plan})
        if unused:
            self.warnings.append("source channels not named in the machine description were "
                                 f"not stored: {', '.join(unused)}")
        self.fs = header.sample_rate_hz
        with self.db.write() as conn:
            mid, _ = q.upsert_machine(conn, self.desc)
            self.run_id = q.create_run(
                conn, machine_id=mid, kind="mixed", label=self.label or self.source_name,
                cycle=self.cycle, notes=self.notes, started_at=self.started_at,
                source_name=self.source_name, source_sha256="", sample_rate_hz=self.fs,
                description_toml=self.description_text, state="incomplete")
            for pos, (col, role, probe, unit, scale) in enumerate(plan):
                cid = q.add_channel(
                    conn, run_id=self.run_id, position=pos, name=header.channels[col],
                    role=role, probe_name=probe.name if probe else None,
                    kind=probe.kind if probe else None, unit=unit, scale=scale,
                    sample_rate_hz=self.fs)
                self.channels.append(RecordedChannel(
                    id=cid, name=header.channels[col], role=role,
                    probe_name=probe.name if probe else None,
                    kind=probe.kind if probe else None, unit=unit))
            if self.warnings:
                q.update_run(conn, self.run_id, warnings=list(self.warnings))
        self._cols = np.array([c for c, *_ in plan])
        self._scales = np.array([s for *_, s in plan], dtype=np.float64)[:, None]
        self._unit_scale = bool(np.all(self._scales == 1.0))
        self._n_source = len(header.channels)
        return self.run_id

    def add(self, block) -> np.ndarray:
        """Take a source block (n_source_channels, n); return the stored values
        (n_stored_channels, n) float32 in storage units, exactly as they are written."""
        x = np.asarray(block)
        if x.ndim != 2 or x.shape[0] != self._n_source:
            raise InputError(f"{self.source_name}: block of shape {x.shape}, expected "
                             f"({self._n_source}, n)")
        sel = x[self._cols].astype(np.float64 if not self._unit_scale else x.dtype)
        if not self._unit_scale:
            sel = sel * self._scales
        with np.errstate(over="ignore"):
            s32 = np.ascontiguousarray(sel, dtype=np.float32)
        if not np.isfinite(s32).all():
            ch, idx = np.argwhere(~np.isfinite(s32))[0]
            raise InputError(f"{self.source_name}: channel {self.channels[ch].name!r}, sample "
                             f"{self.n_received + idx}: value {sel[ch, idx]!r} is not a finite "
                             "number (after scaling)")
        self._pending.append(s32)
        self._pending_n += s32.shape[1]
        self.n_received += s32.shape[1]
        while self._pending_n >= self.chunk_samples:
            self._flush(self.chunk_samples)
        return s32

    def _flush(self, n: int) -> None:
        data = np.concatenate(self._pending, axis=1) if len(self._pending) > 1 else \
            self._pending[0]
        chunk, rest = data[:, :n], data[:, n:]
        rows = [(ch.id, self._chunk_index, self.n_stored, chunk[i])
                for i, ch in enumerate(self.channels)]
        new_len = self.n_stored + chunk.shape[1]
        with self.db.write() as conn:
            q.write_chunks(conn, rows, self.fs)
            q.set_channel_lengths(conn, {ch.id: new_len for ch in self.channels})
            q.update_run(conn, self.run_id, n_samples=new_len)
        self._hash.update(np.ascontiguousarray(chunk, dtype="<f4").tobytes())
        self.n_stored = new_len
        self._chunk_index += 1
        self._pending = [rest] if rest.shape[1] else []
        self._pending_n = rest.shape[1]

    def finish(self, state: str = "complete", note: str | None = None) -> None:
        """Write the partial last chunk and mark the run ``state``."""
        if self.run_id is None:
            return
        if self._pending_n:
            self._flush(self._pending_n)
        if note:
            self.warnings.append(note)
        with self.db.write() as conn:
            q.update_run(conn, self.run_id, state=state, warnings=list(self.warnings),
                         source_sha256="samples:" + self._hash.hexdigest())


def record(db: Database, desc: MachineDescription, source: Source, *,
           description_text: str = "", label: str = "", cycle: str = "", notes: str = "",
           started_at: datetime | None = None,
           on_start: Callable[[int, list[RecordedChannel], float], None] | None = None,
           on_block: Callable[[np.ndarray, int], None] | None = None,
           on_end: Callable[[str, str | None], None] | None = None,
           chunk_samples: int = q.CHUNK_SAMPLES) -> RecordResult:
    """Record ``source`` as a new run of the machine ``desc`` describes.

    ``on_start(run_id, channels, fs)`` is called once the run exists; ``on_block(values,
    start_index)`` with the stored values of every block; ``on_end(state, error)`` before
    the run is closed. A source error (:class:`~rundash.errors.InputError`) or Ctrl-C
    ends the run as ``'incomplete'`` with what arrived; the error is in the result. When
    it comes before the first sample, the empty run is deleted and the error raised.
    """
    rec = Recorder(db, desc, description_text=description_text, label=label, cycle=cycle,
                   notes=notes, started_at=started_at, source_name=source.name,
                   chunk_samples=chunk_samples)
    error: str | None = None
    state = "complete"
    try:
        header = source.open()
        run_id = rec.start(header)
        if on_start is not None:
            on_start(run_id, rec.channels, rec.fs)
        for block in source.blocks():
            start = rec.n_received
            values = rec.add(block)
            if on_block is not None and values.shape[1]:
                on_block(values, start)
    except RundashError as exc:
        if rec.run_id is None:
            raise
        if rec.n_received == 0:  # nothing arrived: no empty run stays behind
            _drop_empty(db, rec.run_id)
            raise
        error, state = str(exc), "incomplete"
    except KeyboardInterrupt:
        if rec.run_id is None:
            raise
        if rec.n_received == 0:
            _drop_empty(db, rec.run_id)
            raise
        error, state = "recording stopped by the user", "incomplete"
    except BaseException:
        if rec.run_id is not None and rec.n_received == 0:
            _drop_empty(db, rec.run_id)
        raise
    finally:
        source.close()
    if on_end is not None:
        on_end(state, error)
    rec.finish(state, None if error is None else f"recording ended early: {error}")
    return RecordResult(run_id=rec.run_id, n_samples=rec.n_stored, state=state, error=error,
                        warnings=list(rec.warnings))


def _drop_empty(db: Database, run_id: int) -> None:
    with db.write() as conn:
        q.delete_empty_run(conn, run_id)
