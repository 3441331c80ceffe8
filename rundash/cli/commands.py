"""The commands: each a function with typed keyword arguments returning an exit code."""

from __future__ import annotations

import json
import sys
from datetime import datetime, timezone
from pathlib import Path

from rundash.cli.common import DEMO_DB, open_db, print_table, progress_bar, settle_imports
from rundash import CAUTION
from rundash.errors import InputError, RundashError


def cmd_import(*, db: str | None, data: str, machine: str, label: str, cycle: str, notes: str,
               started: datetime | None, kind: str, force: bool, process: bool, quiet: bool
               ) -> int:
    from rundash.ingest.importer import import_run, split_import_kind
    from rundash.ingest.machine_file import load_machine_description

    settle_imports()

    kind, test_kind = split_import_kind(kind)
    desc, text = load_machine_description(machine)
    database = open_db(db, create=True)
    bar = progress_bar(quiet)
    res = import_run(database, data, desc, description_text=text, label=label, cycle=cycle,
                     notes=notes, started_at=started, kind=kind, force=force,
                     progress=bar, test_kind=test_kind)
    bar.close()
    if not quiet and res.time_base:
        print(f"time base: {res.time_base}", file=sys.stderr)
    for w in res.warnings:
        print(f"warning: {w}", file=sys.stderr)
    if process:
        from rundash.workflows.pipeline import process_run
        try:
            process_run(database, res.run_id, progress=bar)
        except RundashError as exc:  # the import stands: say which run is left unprocessed
            raise type(exc)(f"{Path(data).name}: imported as run {res.run_id} but not "
                            f"processed ({exc}); fix and run 'rundash process {res.run_id}'"
                            ) from exc
        bar.close()
    print(res.run_id)
    return 0


def cmd_runs(*, db: str | None, machine: str | None, as_json: bool) -> int:
    from rundash.storage import queries as q

    from rundash.workflows.review import review_states

    database = open_db(db)
    with database.read() as conn:
        runs = q.list_runs(conn)
    if machine:
        runs = [r for r in runs if r.machine_name == machine]
    review = review_states(database, runs)
    if as_json:
        print(json.dumps([{
            "id": r.id, "machine": r.machine_name, "kind": r.kind, "test_kind": r.test_kind,
            "label": r.label,
            "cycle": r.cycle, "started_at": r.started_at.isoformat() if r.started_at else None,
            "state": r.state, "source": r.source_name, "duration_s": round(r.duration_s, 3),
            "processed": r.processed, "verdict": r.verdict, "review": review[r.id]}
            for r in runs], indent=2))
        return 0
    rows = [("id", "machine", "kind", "started (UTC)", "cycle", "label", "state", "processed",
             "verdict", "review")]
    for r in runs:
        rows.append((str(r.id), r.machine_name,
                     r.kind if r.test_kind == "field" else f"{r.kind}, {r.test_kind}",
                     r.started_at.strftime("%Y-%m-%d %H:%M") if r.started_at else "-",
                     r.cycle or "-", r.label, r.state, "yes" if r.processed else "no",
                     r.verdict or "-", review[r.id]))
    print_table(rows)
    return 0


def cmd_machines(*, db: str | None) -> int:
    from rundash.storage import queries as q

    database = open_db(db)
    with database.read() as conn:
        machines = q.list_machines(conn)
    rows = [("id", "name", "kind", "operating range (rpm)", "trip (rpm)", "profile", "probes",
             "runs")]
    for m in machines:
        s = m.spec
        rows.append((str(m.id), s.name, s.kind,
                     f"{s.min_operating_speed_rpm:g}-{s.max_continuous_speed_rpm:g}",
                     f"{s.trip_speed_rpm:g}" if s.trip_speed_rpm else "-", s.profile,
                     str(len(m.probes)), str(m.n_runs)))
    print_table(rows)
    return 0



def cmd_process(*, db: str | None, run: int, orders: tuple[float, ...], revs_per_block: int,
                slow_roll: tuple[float, float] | None, quiet: bool, timings: bool = False,
                tracker: str | None = None) -> int:
    from rundash.workflows.pipeline import ProcessingParams, process_run

    settle_imports()

    params = ProcessingParams(orders=orders, revs_per_block=revs_per_block,
                              slow_roll_rpm=slow_roll, tracker=tracker)
    database = open_db(db)
    bar = progress_bar(quiet)
    res = process_run(database, run, params=params, progress=bar)
    bar.close()
    for w in res.warnings:
        print(f"warning: {w}", file=sys.stderr)
    sr = (f"{res.slow_roll_rpm[0]:.0f}-{res.slow_roll_rpm[1]:.0f} rpm" if res.slow_roll_rpm
          else "none")
    print(f"run {run}: {res.run_kind}, {res.n_revs} revolutions, {res.n_blocks} vectors per "
          f"probe and order, slow-roll window {sr}")
    if res.findings is not None:
        print(f"verdict: {res.findings.get('run_verdict')} "
              f"({len(res.findings.get('criticals', []))} critical-speed findings)")
    from rundash.workflows.review import review_of

    rv = review_of(database, run)
    if rv["sign_off"] and not rv["sign_off"]["current"]:
        print(f"note: {rv['sign_off']['note']} ('rundash review {run}' shows what was signed)",
              file=sys.stderr)
    if timings:
        print(f"stage times, wall and CPU s ('read' runs beside 'tracking', 'save' beside "
              f"'findings' and 'modal fits', each in a thread of its own), wall "
              f"{res.wall_s:.2f} s:")
        for stage, sec in res.stage_s.items():
            print(f"  {stage:<12} {sec:7.2f} {res.stage_cpu_s.get(stage, 0.0):7.2f}")
    return 0


def cmd_findings(*, db: str | None, run: int, as_json: bool) -> int:
    from rundash import presentation as pr
    from rundash.errors import NotFoundError
    from rundash.storage import queries as q

    from rundash.workflows.review import findings_with_review

    database = open_db(db)
    with database.read() as conn:
        q.get_run(conn, run)
        kinds = {c.probe_name: c.kind for c in q.list_channels(conn, run) if c.role == "probe"}
    f = findings_with_review(database, run)
    if f is None:
        raise NotFoundError(f"run {run} has no findings yet: run 'rundash process {run}' first")
    if as_json:
        print(json.dumps(f, indent=2))
        return 0
    r, mach = f["run"], f["machine"]
    print(f"run {r['id']}: {r['machine']} — {r['label']} ({r['kind']}, {r['cycle'] or 'no cycle'}, "
          f"{r['started_at'] or 'start time not given'})")
    print(f"operating range {pr.number(mach['min_operating_speed_rpm'])}-"
          f"{pr.number(mach['max_continuous_speed_rpm'])} rpm; profile {f['profile']['name']}: "
          f"{f['profile']['title']}")
    print(f"verdict: {f['run_verdict'].upper()}")
    conf = (f.get("profile") or {}).get("confidence_note")
    if conf:  # how sure the profile is: said once, under the verdict
        print(f"profile confidence: {conf}")
    rv = f["review"]
    if rv["state"] != "processed":
        print(f"review: {rv['state']}; verdict after the engineer's review: "
              f"{str(rv['run_verdict']).upper()} ('rundash review {run}' shows the decisions)")
        if rv["sign_off"]:
            print(f"signed off: {rv['sign_off']['decision']} by {rv['sign_off']['name']} on "
                  f"{rv['sign_off']['signed_on']}; {rv['sign_off']['note']}")
    print(pr.summary_line(f))
    print()
    cols = [("probe", "probe"), ("direction", "dir"), ("speed", "speed rpm"),
            ("peak", "peak 1X"), ("af_half_power", "AF hp"), ("af_phase", "AF phase"),
            ("af_fit", "AF fit"), ("classification", "class"), ("confidence", "conf"),
            ("margin", "margin"), ("required", "required"), ("verdict", "verdict")]
    crit = pr.critical_rows(f, kinds=kinds)
    if crit:
        print_table([tuple(t for _, t in cols)] + [tuple(c[k] for k, _ in cols) for c in crit])
        print()
        print("apparent (sweep) and sweep-free readings; the margin uses the one marked"
              f"{pr.GOVERNS_MARK}:")
        cols = [("probe", "probe"), ("direction", "dir"), ("apparent", "apparent rpm, AF"),
                ("sweep_free", "sweep-free rpm, AF"), ("governs", "governs")]
        print_table([tuple(t for _, t in cols)] + [tuple(c[k] for k, _ in cols) for c in crit])
    else:
        print("no critical speed found in the speed range of the run")
    lines = pr.modal_model_lines(f) + pr.bearing_mode_lines(f)
    if lines:
        print()
        print("modal model of the run:")
        for line in lines:
            print(f"  {line}")
    judged = [x for x in pr.limit_rows(f, kinds=kinds) if x["judged"]]
    if judged:
        print()
        cols = [("probe", "probe"), ("direction", "dir"), ("measure", "measure"),
                ("where", "where"), ("speed", "at rpm"), ("value", "level"), ("limit", "limit"),
                ("zone", "zone"), ("verdict", "result")]
        print_table([tuple(t for _, t in cols)] + [tuple(x[k] for k, _ in cols) for x in judged])
    for w in f["warnings"]:
        if w != conf:
            print(f"note: {w}")
    print()
    print(f["caution"])
    return 0


def cmd_serve(*, db: str | None, host: str, port: int, debug: bool,
              password_file: str | None) -> int:
    from rundash.dashboard.app import serve
    from rundash.dashboard.security import check_serve_options, resolve_password

    password = resolve_password(password_file)
    check_serve_options(host, password=password, debug=debug)  # before opening anything
    database = open_db(db)
    return serve(database, host=host, port=port, debug=debug, password=password)


def cmd_demo(*, db: str | None, host: str, port: int, serve: bool, quiet: bool) -> int:
    from rundash.workflows.demo import build_demo

    database = open_db(db or DEMO_DB, create=True)
    bar = progress_bar(quiet)

    def log(line: str) -> None:
        bar.close()                 # the stage's last line before the result it led to
        print(line, flush=True)

    ids = build_demo(database, progress=bar, log=log)
    bar.close()
    print(f"demo database: {database.url} ({len(ids)} runs)")
    if not serve:
        return 0
    from rundash.dashboard.app import serve as serve_app
    from rundash.dashboard.security import resolve_password
    return serve_app(database, host=host, port=port, debug=False, password=resolve_password())


def cmd_sync(*, source: str, to: str, machine: str | None, as_json: bool, quiet: bool) -> int:
    from rundash.storage.sync import sync

    src, dst = open_db(source), open_db(to, create=True)
    bar = progress_bar(quiet or as_json)

    def log(line: str) -> None:
        bar.close()
        if not as_json:
            print(line, flush=True)

    report = sync(src, dst, machine=machine, progress=bar, log=log)
    bar.close()
    if as_json:
        print(json.dumps(report.to_dict(), indent=2, default=str))
        return 0
    for name in report.machines_created:
        print(f"machine created: {name}")
    for name in report.machines_differing:
        print(f"machine kept as the destination describes it (the source differs): {name}")
    for name in report.probes_added:
        print(f"probe added: {name}")
    print(f"sync {report.source} -> {report.destination}: {report.summary()}")
    return 0


def write_export(data: bytes, output: str | None) -> None:
    """Write an export's bytes to ``output`` (stdout for '-' or none) and say where."""
    if output in (None, "-"):
        sys.stdout.buffer.write(data)
        sys.stdout.flush()
        return
    Path(output).write_bytes(data)
    print(output)


def cmd_export(*, db: str | None, run: int, what: str, orders: tuple[float, ...] | None,
               probe: str | None, fmt: str | None, output: str) -> int:
    from rundash.workflows.export import format_of, run_table, table_bytes

    fmt = format_of(output, fmt) if output != "-" else (fmt or "csv")
    df = run_table(open_db(db), run, what, orders=orders, probe=probe)
    write_export(table_bytes(df, fmt, sheet=what), output)
    return 0


def cmd_compare(*, db: str | None, runs: list[int], as_json: bool, boot: int,
                speeds: list[float] | None, fmt: str | None = None,
                output: str | None = None) -> int:
    from rundash import presentation as pr
    from rundash.workflows.comparison import compare_runs

    settle_imports()

    if output and not fmt and not as_json:
        from rundash.workflows.export import format_of
        fmt = format_of(output)
    if fmt and as_json:
        raise InputError("give --json or --format, not both")
    c = compare_runs(open_db(db), runs, phase_speeds_rpm=speeds, n_boot=boot)
    if fmt:
        from rundash.workflows.export import comparison_table, table_bytes
        write_export(table_bytes(comparison_table(c), fmt, sheet="comparison"), output)
        return 0
    if output:
        raise InputError("-o/--output needs --format (csv, parquet or xlsx)")
    if as_json:
        print(json.dumps(c, indent=2))
        return 0
    by_id = {r["id"]: r for r in c["runs"]}
    print(f"{c['machine']['name']}: comparison with {pr.run_name(by_id[c['reference']])}")
    for p in c["pairs"]:
        print()
        print(f"{pr.run_name(by_id[p['a']])} -> {pr.run_name(by_id[p['b']])}: "
              f"{p['verdict'].upper()}")
        cols = [("probe", "probe"), ("direction", "dir"), ("speeds", "critical rpm"),
                ("speed_shift", "shift"), ("speed_sig", "speed shift"), ("afs", "AF"),
                ("af_shift", "AF change"), ("peaks", "peak 1X"), ("peak_shift", "peak change"),
                ("changed", "changed")]
        rows = pr.shift_rows({"pairs": [p]})
        print_table([tuple(t for _, t in cols)] + [tuple(m[k] for k, _ in cols) for m in rows])
        ph = pr.phase_rows(p)
        if ph:
            print()
            cols = [("probe", "probe"), ("quantity", "quantity"), ("a", "a"), ("b", "b"),
                    ("change", "change"), ("significant", "change is")]
            print_table([tuple(t for _, t in cols)] + [tuple(x[k] for k, _ in cols) for x in ph])
        sr = pr.slow_roll_rows(p)
        if sr:
            print()
            cols = [("probe", "probe"), ("a", "slow roll a"), ("b", "slow roll b"),
                    ("change", "change"), ("material", "material")]
            print_table([tuple(t for _, t in cols)] + [tuple(x[k] for k, _ in cols) for x in sr])
        for n in pr.pair_notes(p):
            print(f"note: {n}")
    if c["hints"]:
        print()
        for h in c["hints"]:
            print(h)
    print()
    print(f"significant: {c['rule']}")
    print(f"uncertainties (±, one sigma): {c['method']}")
    print()
    print(c["caution"])
    return 0


def cmd_report(*, db: str | None, run: int, compare: list[int] | None, output: str,
               reviewer: str, role: str, decision: str, remarks: str, boot: int) -> int:
    from rundash.report import write_report

    settle_imports()

    path = write_report(open_db(db), run, output, compare=compare or (), reviewer=reviewer,
                        role=role, decision=decision, remarks=remarks, n_boot=boot)
    print(path)
    return 0


def cmd_record(*, db: str | None, machine: str, source: str, label: str, cycle: str,
               notes: str, lead_time: float, dwell_limit: float, no_process: bool) -> int:
    import signal

    from rundash.ingest.machine_file import load_machine_description
    from rundash.ingest.sources import parse_source
    from rundash.workflows.live import LiveParams, WarningSettings, record_live

    desc, text = load_machine_description(machine)
    database = open_db(db, create=True)
    src = parse_source(source, desc.data)
    # a polite stop (kill, service manager) ends the run like Ctrl-C: kept, incomplete
    def _stop(*_):
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, _stop)
    params = LiveParams(warnings=WarningSettings(lead_time_s=lead_time, dwell_limit_s=dwell_limit),
                        process_at_end=not no_process)
    res = record_live(database, desc, src, description_text=text, label=label, cycle=cycle,
                      notes=notes, started_at=datetime.now(timezone.utc), params=params,
                      log=lambda line: print(line, file=sys.stderr, flush=True))
    for w in res.notes:
        print(f"warning: {w}", file=sys.stderr)
    if res.processed:
        print(CAUTION, file=sys.stderr)
    if res.error is not None:
        raise InputError(f"run {res.run_id} kept as incomplete ({res.n_samples} samples per "
                         f"channel): {res.error}")
    print(res.run_id)
    return 0


def cmd_reprocess(*, db: str | None, machine: str | None, all_runs: bool, workers: int,
                  scheduler: str | None, orders: tuple[float, ...], quiet: bool) -> int:
    from rundash.workflows.batch import reprocess
    from rundash.errors import NotFoundError
    from rundash.storage import queries as q

    settle_imports()

    if not machine and not all_runs:
        raise InputError("say which runs: --machine NAME or --all")
    database = open_db(db)
    with database.read() as conn:
        runs = [r for r in q.list_runs(conn) if r.state == "complete"
                and (all_runs or r.machine_name == machine)]
    if not runs:
        raise NotFoundError("no complete runs to process" +
                            (f" for machine {machine!r}" if machine else ""))
    bar = progress_bar(quiet)

    def log(line: str) -> None:
        bar.close()
        print(line, flush=True)

    report = reprocess(database.url, sorted(r.id for r in runs), workers=workers,
                       scheduler=scheduler, params={"orders": list(orders)},
                       progress=bar, log=log)
    bar.close()
    print(report.summary())
    for o in report.failed:
        print(f"failed: {o.line()}")
    print(CAUTION)
    return 0 if not report.failed else 1
