"""A small read cache of stored results for the dashboard's callbacks.

One :class:`ResultCache` lives on each Dash app (``app.rundash_cache``, made by
:func:`cache_of`), never at module level, so two apps on two databases never share it.
Entries are keyed by run id and the processing's ``created_at``: processing a run again
writes a new ``created_at``, so stale entries are never served, only aged out
(least recently used first).

Everything read here goes through :mod:`rundash.storage.queries`.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from typing import Any, Callable

#: Entries kept (a 10-minute run's track pair of one probe and order is ~2 MB).
DEFAULT_ENTRIES = 64


class ResultCache:
    """LRU of what the review page reads: context, tracks, speed profile, tach.

    Parameters
    ----------
    db : Database
        The database the app reads.
    maxsize : int
        Entries kept; 0 disables caching (every call reads the database).
    """

    def __init__(self, db, *, maxsize: int = DEFAULT_ENTRIES) -> None:
        self.db = db
        self.maxsize = int(maxsize)
        self._lock = threading.Lock()
        self._entries: OrderedDict[tuple, Any] = OrderedDict()
        self.hits = 0
        self.misses = 0

    # ------------------------------------------------------------------ machinery
    def _get(self, key: tuple, load: Callable[[], Any]) -> Any:
        if self.maxsize <= 0:
            return load()
        with self._lock:
            if key in self._entries:
                self._entries.move_to_end(key)
                self.hits += 1
                return self._entries[key]
        value = load()  # outside the lock: two threads may both load; both are right
        with self._lock:
            self.misses += 1
            self._entries[key] = value
            self._entries.move_to_end(key)
            while len(self._entries) > self.maxsize:
                self._entries.popitem(last=False)
        return value

    def clear(self) -> None:
        with self._lock:
            self._entries.clear()

    def __len__(self) -> int:
        return len(self._entries)

    # ------------------------------------------------------------------ reads
    def stamp(self, run_id: int):
        """The run's processing record (or None) and the cache key part it gives."""
        from rundash.storage import queries as q

        with self.db.read() as conn:
            proc = q.load_processing(conn, run_id)
        return proc, (int(run_id), proc.created_at.isoformat() if proc is not None else None)

    def context(self, run_id: int) -> dict[str, Any]:
        """Run, machine, processing, channels and probes of a run (see
        :func:`rundash.dashboard.pages.review.load_context`)."""
        from rundash.storage import queries as q

        proc, key = self.stamp(run_id)

        def load():
            with self.db.read() as conn:
                run = q.get_run(conn, run_id)
                machine = q.get_machine(conn, q.run_machine_id(conn, run_id))
                channels = q.list_channels(conn, run_id)
            return run, machine, channels

        run, machine, channels = self._get(("context",) + key, load)
        by_name = {p.name: p for p in machine.probes}
        probes = [by_name[c.probe_name] for c in channels
                  if c.role == "probe" and c.probe_name in by_name]
        return {"run": run, "machine": machine, "processing": proc, "channels": channels,
                "probes": probes, "findings": proc.findings if proc is not None else None,
                "key": key}

    def tracks(self, key: tuple, probe: str, order: float) -> list:
        """Stored tracks (compensated and not) of one probe and order."""
        from rundash.storage import queries as q

        def load():
            with self.db.read() as conn:
                return q.load_tracks(conn, key[0], order=float(order), probe_name=probe)

        return self._get(("tracks", probe, float(order)) + key, load)

    def speed_profile(self, key: tuple):
        from rundash.storage import queries as q

        def load():
            with self.db.read() as conn:
                return q.load_speed_profile(conn, key[0])

        return self._get(("speed",) + key, load)

    def tach(self, key: tuple, kind: str = "once_per_rev"):
        from rundash.storage import queries as q

        def load():
            with self.db.read() as conn:
                return q.load_tach(conn, key[0], kind)

        return self._get(("tach", kind) + key, load)

    def cascade(self, key: tuple, probe: str):
        """The stored cascade of one probe (None when there is none)."""
        from rundash.storage import queries as q

        def load():
            with self.db.read() as conn:
                return {c.probe_name: c for c in q.load_cascades(conn, key[0])}

        return self._get(("cascades",) + key, load).get(probe)

    def guidance_lines(self, key: tuple, profile, **kw):
        from rundash import figures
        from rundash.ingest.profile_file import load_profile

        items = tuple(sorted((k, tuple(v) if isinstance(v, (list, tuple)) else v)
                             for k, v in kw.items()))
        return self._get(("guidance", str(profile), items) + key,
                         lambda: figures.guidance_lines(load_profile(profile), **kw))


def cache_of(app, db) -> ResultCache:
    """The app's cache, made on first use (one per app object)."""
    cache = getattr(app, "rundash_cache", None)
    if cache is None:
        cache = ResultCache(db)
        app.rundash_cache = cache
    return cache
