"""Write the bad-input corpus: data files and machine descriptions that rundash must refuse
with one clear line (or accept with a recorded warning), generated, never committed.

Run ``python tests/badinput/make_corpus.py FOLDER`` to write the corpus into FOLDER and
print one line per case; ``tests/badinput/test_corpus.py`` calls :func:`build` into a
temporary folder and feeds every case to ``rundash import`` through ``rundash.cli.main``.

The files are written with numpy, h5py, pyarrow, asammdf and hand-packed RIFF headers; nothing
here imports rundash, so what a case contains does not depend on the code under test.
The good baseline is an invented run-up of a test rig (600 to 3000 rpm in 10 s, one
lightly damped mode near 1800 rpm), recorded in volts: proximity probes at 7.874 mV/um,
a velocity pickup at 4 mV/(mm/s), a 5 V once-per-rev pulse train.

Each :class:`Case` says what must happen:

``refused``
    ``rundash import`` exits 1 with one line that contains every regular expression of
    ``match``, and the database is left byte-identical.
``warned``
    The import succeeds and the run's recorded warnings match ``match``.
``process_fails``
    ``rundash import --process`` imports the run (one transaction, whole), then
    processing fails: exit 1, one line matching ``match``; the run stays imported and
    unprocessed.
``process_warned``
    Import and processing succeed; the processing warnings match ``match``.
"""

from __future__ import annotations

import struct
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

FS = 1000.0  # Hz
DURATION_S = 10.0
RPM0, RPM1 = 600.0, 3000.0
CRIT_RPM, ZETA = 1800.0, 0.05
SENS_PROX_V_PER_UM = 7.874e-3
SENS_VEL_V_PER_MM_S = 4.0e-3
WAV_FULL_SCALE_V = 10.0

MACHINE = """\
[machine]
name = "Corpus rig C-1"
kind = "compressor"
rated_speed_rpm = 2800
min_operating_speed_rpm = 2600
max_continuous_speed_rpm = 2900
profile = "fixed-margin"

[tach]
column = "{tach}"
pulses_per_rev = 1
edge = "rising"

[[probes]]
name = "C1-X"
column = "{x}"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
bearing = "DE"
axis = "X"
pair = "C1-Y"

[[probes]]
name = "C1-Y"
column = "{y}"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
bearing = "DE"
axis = "Y"
pair = "C1-X"

[[probes]]
name = "C1-V"
column = "{v}"
kind = "velocity"
units = "mm/s"
sensitivity_mv_per_unit = 4.0
bearing = "DE"

[data]
signal_units = "V"
{data}"""

COLUMNS = dict(tach="tach", x="x1", y="y1", v="v1")
WAV_COLUMNS = dict(tach="ch1", x="ch2", y="ch3", v="ch4")
NAMES = ("time_s", "tach", "x1", "y1", "v1")


@dataclass(frozen=True)
class Case:
    """One corpus entry: a data file, a machine description and what must happen."""

    name: str
    data: str
    machine: str
    expect: str  # 'refused', 'warned', 'process_fails', 'process_warned'
    match: tuple[str, ...]
    what: str
    process: bool = False
    extra: tuple[str, ...] = field(default=())


# ----------------------------------------------------------------------------- signals
def signals(n: int | None = None, *, rpm0: float = RPM0, rpm1: float = RPM1,
            tach: str = "pulses", seed: int = 0) -> dict[str, np.ndarray]:
    """The baseline columns in volts (time in s): a linear run-up through one mode."""
    rng = np.random.default_rng(seed)
    n = int(FS * DURATION_S) if n is None else n
    t = np.arange(n) / FS
    dur = n / FS
    rate = (rpm1 - rpm0) / dur
    theta = (rpm0 * t + 0.5 * rate * t * t) / 60.0  # revolutions
    rpm = rpm0 + rate * t
    r = rpm / CRIT_RPM
    # unbalance response of one viscous mode: r^2 / (1 - r^2 + 2j zeta r), 40 um p-p scale
    h = 20.0 * r * r / (1.0 - r * r + 2j * ZETA * r)
    ang = 2 * np.pi * theta
    x_um = np.real(h * np.exp(1j * ang)) + 0.2 * rng.standard_normal(n)
    y_um = np.real(h * np.exp(1j * (ang - np.pi / 2))) + 0.2 * rng.standard_normal(n)
    v_mm_s = 0.002 * rpm / 60.0 * np.abs(h) * np.cos(ang) + 0.05 * rng.standard_normal(n)
    if tach == "pulses":
        phase = np.mod(theta, 1.0)
        tach_v = np.where(phase < 0.2, 5.0, 0.0)
    elif tach == "flat":
        tach_v = np.zeros(n)
    elif tach == "stuck":  # a few pulses, then stuck high for good
        phase = np.mod(theta, 1.0)
        tach_v = np.where(phase < 0.2, 5.0, 0.0)
        tach_v[int(0.02 * n):] = 5.0
    elif tach == "gaps":  # three single pulses lost (a dirty marker, a loose connector)
        phase = np.mod(theta, 1.0)
        tach_v = np.where(phase < 0.2, 5.0, 0.0)
        for rev in (40, 75, 110):
            tach_v[np.floor(theta) == rev] = 0.0
    elif tach == "noise":  # the tach column carries noise only (a broken probe lead)
        tach_v = 0.5 * rng.standard_normal(n)
    else:  # pragma: no cover - generator misuse
        raise ValueError(tach)
    return {"time_s": t, "tach": tach_v, "x1": x_um * SENS_PROX_V_PER_UM,
            "y1": y_um * SENS_PROX_V_PER_UM, "v1": v_mm_s * SENS_VEL_V_PER_MM_S}


# ----------------------------------------------------------------------------- writers
def csv_text(cols: dict[str, np.ndarray], names=NAMES) -> str:
    data = np.column_stack([cols[k] for k in names])
    lines = [",".join(names)]
    lines += [",".join(f"{v:.9g}" for v in row) for row in data]
    return "\n".join(lines) + "\n"


def write_csv(path: Path, cols, names=NAMES) -> Path:
    path.write_text(csv_text(cols, names), encoding="utf-8")
    return path


def wav_bytes(frames: np.ndarray, *, fs: float = FS, tag: int = 1, bits: int = 16,
              align: int | None = None, data_size: int | None = None,
              fmt_first: bool = True, fmt_len: int = 16) -> bytes:
    """A RIFF/WAVE file packed by hand; frames (n, n_channels) already in file samples."""
    nch = frames.shape[1]
    raw = frames.astype({(1, 16): "<i2", (1, 32): "<i4", (3, 32): "<f4", (3, 64): "<f8",
                         (1, 8): "u1"}[(tag, bits)]).tobytes()
    align = nch * bits // 8 if align is None else align
    fmt = struct.pack("<HHIIHH", tag, nch, int(fs), int(fs) * align, align, bits)[:fmt_len]
    fmt_chunk = b"fmt " + struct.pack("<I", len(fmt)) + fmt
    data_chunk = b"data" + struct.pack("<I", len(raw) if data_size is None else data_size) + raw
    body = b"WAVE" + (fmt_chunk + data_chunk if fmt_first else data_chunk + fmt_chunk)
    return b"RIFF" + struct.pack("<I", len(body)) + body


def wav_frames(cols, *, bits: int = 16, clip_probe: float | None = None) -> np.ndarray:
    """PCM codes (n, 4) of tach, x1, y1, v1 at WAV_FULL_SCALE_V; optional clipping of x1
    at ``clip_probe`` of full scale (the recorder's input saturates)."""
    v = np.column_stack([cols["tach"], cols["x1"], cols["y1"], cols["v1"]]) / WAV_FULL_SCALE_V
    if clip_probe is not None:
        v[:, 1] = v[:, 1] / np.max(np.abs(v[:, 1])) * 1.6 * clip_probe
    full = 2 ** (bits - 1)
    return np.clip(np.round(v * full), -full, full - 1)


def write_hdf5(path: Path, cols, *, names=NAMES[1:], attrs=None, lengths=None,
               group: str | None = None, extra=None) -> Path:
    import h5py

    with h5py.File(path, "w") as f:
        g = f if group is None else f.create_group(group)
        for k in names:
            x = np.asarray(cols[k], dtype=np.float32)
            if lengths and k in lengths:
                x = x[: lengths[k]]
            g.create_dataset(k, data=x)
        for k, v in (attrs if attrs is not None else {"sample_rate_hz": FS}).items():
            g.attrs[k] = v
        for k, v in (extra or {}).items():
            g.create_dataset(k, data=v)
    return path


def write_parquet(path: Path, cols, *, names=NAMES, metadata=None, types=None) -> Path:
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrays = []
    for k in names:
        a = cols[k]
        arrays.append(pa.array(a, type=(types or {}).get(k)))
    table = pa.table(dict(zip(names, arrays)))
    if metadata:
        table = table.replace_schema_metadata({k.encode(): str(v).encode()
                                               for k, v in metadata.items()})
    pq.write_table(table, path, row_group_size=4096)
    return path


def write_mdf(path: Path, cols, *, groups=(("tach", "x1"), ("y1", "v1")), fs=None,
              rename=None, text=None) -> Path:
    """An MDF4 file (asammdf) with one channel group per entry of ``groups``; ``fs`` maps a
    group number to its own rate, ``rename`` a column to its name in the file, ``text``
    names a column given a value-to-text conversion rule."""
    from asammdf import MDF, Signal

    mdf = MDF(version="4.10")
    for gi, names in enumerate(groups):
        rate = (fs or {}).get(gi, FS)
        n = int(round(DURATION_S * rate))
        t = np.arange(n) / rate
        sigs = []
        for k in names:
            x = np.interp(t, cols["time_s"], cols[k])
            conv = None
            if k == text:
                x = (x > np.median(x)).astype(np.uint8)
                conv = {"val_0": 0, "text_0": b"low", "val_1": 1, "text_1": b"high"}
            sigs.append(Signal(samples=x, timestamps=t, name=(rename or {}).get(k, k),
                               unit="V", conversion=conv))
        mdf.append(sigs)
    mdf.save(path, overwrite=True)
    mdf.close()
    return path


def machine_text(*, wav: bool = False, data: str = "") -> str:
    cols = WAV_COLUMNS if wav else COLUMNS
    if wav and "full_scale_v" not in data:
        data = f"full_scale_v = {WAV_FULL_SCALE_V}\n" + data
    return MACHINE.format(data=data, **cols)


# ----------------------------------------------------------------------------- corpus
def build(folder: str | Path) -> list[Case]:
    """Write every case into ``folder`` (created) and return the list."""
    root = Path(folder)
    root.mkdir(parents=True, exist_ok=True)
    cases: list[Case] = []
    rng = np.random.default_rng(20260501)
    base = signals()
    garbage = rng.integers(0, 256, 6000, dtype=np.uint8).tobytes()

    def put(name: str, content: bytes | str) -> str:
        p = root / name
        p.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
        return name

    def machine(name: str, text: str) -> str:
        return put(name, text)

    m_csv = machine("machine.toml", machine_text())
    m_wav = machine("machine_wav.toml", machine_text(wav=True))
    m_csv_rate = machine("machine_rate.toml", machine_text(data="sample_rate_hz = 1000\n"))

    def case(name, data, expect, match, what, machine=m_csv, process=False):
        cases.append(Case(name=name, data=data, machine=machine, expect=expect,
                          match=tuple(match), what=what, process=process))

    # the good files, for the tests' baseline and as sources to damage
    good_csv = write_csv(root / "good.csv", base)
    good_text = good_csv.read_text()
    good_wav = put("good.wav", wav_bytes(wav_frames(base)))
    good_h5 = write_hdf5(root / "good.h5", base)
    good_pq = write_parquet(root / "good.parquet", base)
    del good_wav, good_h5, good_pq

    # ---------------------------------------------------------------- CSV
    lines = good_text.splitlines()
    case("csv_empty", put("empty.csv", b""), "refused", [r"empty\.csv", "empty"],
         "an empty file")
    case("csv_header_only", put("header_only.csv", lines[0] + "\n"), "refused",
         [r"header_only\.csv", "header only"], "a header row and no data")
    case("csv_truncated_mid_row", put("truncated.csv", good_text[: len(good_text) // 2 + 7]),
         "refused", [r"truncated\.csv", "row", "finite|columns"], "cut in the middle of a row")
    def cell(row: int, col: int, value: str) -> str:
        """The good CSV text with one cell replaced (row 1 is the header)."""
        bad = list(lines)
        f = bad[row - 1].split(",")
        f[col] = value
        bad[row - 1] = ",".join(f)
        return "\n".join(bad) + "\n"

    def row(row: int, text: str) -> str:
        bad = list(lines)
        bad[row - 1] = text
        return "\n".join(bad) + "\n"

    case("csv_nan", put("nan.csv", cell(502, 2, "nan")), "refused",
         [r"nan\.csv", "'x1'", "row 502", "finite"], "NaN in a probe column")
    case("csv_inf", put("inf.csv", cell(801, 3, "inf")), "refused",
         [r"inf\.csv", "'y1'", "row 801", "finite"], "an infinite value")
    case("csv_time_backwards", put("time_backwards.csv", cell(301, 0, "0.1")), "refused",
         [r"time_backwards\.csv", "'time_s'", "row 30[01]", "evenly spaced, increasing"],
         "time jumps back (non-monotonic)")
    case("csv_time_repeated", put("time_repeated.csv", cell(4001, 0, lines[3999].split(",")[0])),
         "refused", [r"time_repeated\.csv", "'time_s'", "row 400[01]", "increasing"],
         "a repeated time stamp")
    case("csv_extra_field", put("extra_field.csv", row(2501, lines[2500] + ",0.5")), "refused",
         [r"extra_field\.csv", "row", "5 columns"], "a row longer than the header")
    case("csv_short_row", put("short_row.csv", row(1201, ",".join(lines[1200].split(",")[:3]))),
         "refused", [r"short_row\.csv", "row 1201", "finite"], "a row shorter than the header")
    case("csv_missing_channel",
         write_csv(root / "missing_channel.csv", base, names=("time_s", "tach", "x1", "v1")).name,
         "refused", [r"missing_channel\.csv", "'y1'", "machine description", "not in the file"],
         "a channel the machine file names is absent")
    case("csv_decimal_comma", put("decimal_comma.csv", cell(701, 4, "12,5e-3")), "refused",
         [r"decimal_comma\.csv", "row", "5 columns"], "a decimal comma in one value")
    case("csv_text_value", put("text_value.csv", cell(901, 2, "0.0x")), "refused",
         [r"text_value\.csv", "row", "numbers only"], "a non-numeric value")
    case("csv_empty_cell", put("empty_cell.csv", cell(901, 2, "")), "refused",
         [r"empty_cell\.csv", "'x1'", "row 901"], "an empty cell")
    case("csv_latin1", put("latin1.csv", ("Zeit_s,tach,x1 µm,y1,v1\n" + "\n".join(lines[1:50])
                                          + "\n").encode("latin-1")),
         "refused", [r"latin1\.csv", "UTF-8"], "a Latin-1 header (wrong text encoding)")
    case("csv_utf16", put("utf16.csv", good_text[:20000].encode("utf-16")), "refused",
         [r"utf16\.csv", "binary|UTF-8"], "UTF-16 text (wrong text encoding)")
    case("csv_huge_header", put("huge_header.csv", "time_s,tach," + "x" * (1 << 21) + "\n"),
         "refused", [r"huge_header\.csv", "header row longer"], "a 2 MiB header row")
    case("csv_garbage", put("garbage.csv", garbage), "refused",
         [r"garbage\.csv", "binary|UTF-8|column"], "binary garbage with a .csv ending")
    big = dict(base)
    big["x1"] = base["x1"] * 1e300
    case("csv_huge_values", write_csv(root / "huge_values.csv", big).name, "refused",
         [r"huge_values\.csv", "'x1'", "float32"], "values near 1e300 (wildly large)")
    case("csv_duplicate_column", put("dup_column.csv", lines[0].replace("v1", "x1") + "\n"
                                     + "\n".join(lines[1:100]) + "\n"),
         "refused", [r"dup_column\.csv", "'x1' twice"], "a column named twice")
    case("csv_semicolons", put("semicolons.csv", "\n".join(l.replace(",", ";")
                                                          for l in lines[:200]) + "\n"),
         "refused", [r"semicolons\.csv", "separated by ';'", "comma-separated"],
         "semicolon-separated values where the machine file declares commas (sniffed "
         "semicolons import: tests/ingest/test_csv_dialects.py)",
         machine=machine("machine_comma.toml", machine_text(data='delimiter = ","\n')))
    cols_nt = {k: v for k, v in base.items()}
    case("csv_no_rate", write_csv(root / "no_rate.csv", cols_nt,
                                  names=("tach", "x1", "y1", "v1")).name, "refused",
         [r"no_rate\.csv", "sample rate"], "no time column and no declared rate")
    jit = dict(base)
    jit["time_s"] = base["time_s"] + np.where(np.arange(base["time_s"].size) % 7 == 3,
                                              0.3 / FS, 0.0)
    case("csv_uneven_time", write_csv(root / "uneven_time.csv", jit).name, "refused",
         [r"uneven_time\.csv", "'time_s'", "row", "evenly spaced"], "unevenly spaced time")
    case("csv_rate_conflict", write_csv(root / "rate_conflict.csv", base).name, "refused",
         [r"rate_conflict\.csv", "sample rate", "1000", "2000"],
         "the machine file declares 2000 Hz, the time column says 1000 Hz",
         machine=machine("machine_rate2000.toml",
                         machine_text(data="sample_rate_hz = 2000\n")))
    case("csv_only_time", write_csv(root / "only_time.csv", base, names=("time_s",)).name,
         "refused", [r"only_time\.csv", "no data columns"], "a time column and nothing else")
    gap = {k: np.delete(v, 5000) for k, v in base.items()}
    case("csv_missing_row", write_csv(root / "missing_row.csv", gap).name, "refused",
         [r"missing_row\.csv", "'time_s'", "row 5002", "evenly spaced"],
         "one row missing (a gap of one sample interval in the time column)")
    case("csv_time_text", put("time_text.csv", cell(3001, 0, "00:00:03.000")), "refused",
         [r"time_text\.csv", "'time_s'", "row 3001", "not a number"],
         "a clock time where seconds are expected in the time column")
    slow = dict(base)
    slow["time_s"] = base["time_s"] * 1e12  # a step of 1e9: below 50 Hz in s, ms, us and ns
    case("csv_time_too_slow", write_csv(root / "time_too_slow.csv", slow).name, "refused",
         [r"time_too_slow\.csv", "sample rate", "10 to 1e\+07 Hz"],
         "a time column in s (by its name) whose step gives 1e-9 Hz")
    bare = {k: v for k, v in slow.items() if k != "time_s"}
    bare["time"] = base["time_s"] * 1e12  # no unit in the name: judged by the step size
    case("csv_time_no_unit_too_slow",
         write_csv(root / "time_no_unit.csv", bare, names=("time", *NAMES[1:])).name,
         "refused", [r"time_no_unit\.csv", "'time'", "fewer than 50 samples per second"],
         "a bare 'time' column stepping by 1e9: implausible in s, ms, µs and ns")
    # each of these ended in a traceback once (issue: tracebacks instead of one line)
    case("csv_cr_only", put("cr_only.csv", "\r".join(lines[:300]) + "\r"), "refused",
         [r"cr_only\.csv", "carriage return only"], "old Mac line endings (CR only): a "
         "csv.Error traceback before")
    case("csv_huge_time", put("huge_time.csv", "\n".join(
        [lines[0]] + [f"{1e300 * (i + 1):g}," + ln.split(",", 1)[1]
                      for i, ln in enumerate(lines[1:300])]) + "\n"), "refused",
         [r"huge_time\.csv", "'time_s'", "row 2", "beyond any clock"],
         "time stamps near 1e300: an OverflowError traceback before")
    case("csv_unclosed_quote", put("unclosed_quote.csv", '"' + good_text), "refused",
         [r"unclosed_quote\.csv", "unclosed quote"], "a header row with an unclosed quote")
    case("csv_first_row_long", put("first_row_long.csv", row(2, lines[1] + ",7")), "refused",
         [r"first_row_long\.csv", "row 2 has 6 columns", "expected 5 columns"],
         "the first data row longer than the header: a pandas ValueError traceback before")
    case("csv_epoch_far", put("epoch_far.csv", "\n".join(
        ["timestamp" + lines[0][6:]] + [f"{1e17 + i * 1e3:.1f}," + ln.split(",", 1)[1]
                                       for i, ln in enumerate(lines[1:300])]) + "\n"),
         "refused", [r"epoch_far\.csv", "'timestamp'", "after 2200"],
         "epoch-sized time stamps that are no date in any unit")
    case("csv_one_row", put("one_row.csv", "\n".join(lines[:2]) + "\n"), "refused",
         [r"one_row\.csv", "fewer than two rows"], "one data row")
    del m_csv_rate

    # ---------------------------------------------------------------- WAV
    frames = wav_frames(base)
    good = wav_bytes(frames)
    case("wav_empty", put("empty.wav", b""), "refused", [r"empty\.wav", "empty"],
         "an empty file", machine=m_wav)
    case("wav_riff_only", put("riff_only.wav", good[:12]), "refused",
         [r"riff_only\.wav", "'data' chunk"], "the RIFF header and nothing else", machine=m_wav)
    case("wav_truncated", put("truncated.wav", good[: len(good) // 2]), "refused",
         [r"truncated\.wav", "truncated", "data bytes"], "cut in half", machine=m_wav)
    case("wav_header_only", put("header_only.wav", wav_bytes(frames[:0])), "refused",
         [r"header_only\.wav", "no samples"], "a header and an empty data chunk", machine=m_wav)
    case("wav_garbage", put("garbage.wav", garbage), "refused",
         [r"garbage\.wav", "RIFF/WAVE"], "binary garbage with a .wav ending", machine=m_wav)
    case("wav_zero_rate", put("zero_rate.wav", wav_bytes(frames, fs=0)), "refused",
         [r"zero_rate\.wav", "sample rate", "WAV header"], "a sample rate of 0 in the header",
         machine=m_wav)
    case("wav_bad_align", put("bad_align.wav", wav_bytes(frames, align=6)), "refused",
         [r"bad_align\.wav", "block align"], "block align that does not fit the channels",
         machine=m_wav)
    case("wav_8bit", put("eight_bit.wav", wav_bytes((frames / 256 + 128).astype(np.uint8),
                                                     bits=8)),
         "refused", [r"eight_bit\.wav", "unsupported", "8 bits"], "8-bit PCM", machine=m_wav)
    case("wav_data_before_fmt", put("data_first.wav", wav_bytes(frames, fmt_first=False)),
         "refused", [r"data_first\.wav", "before the 'fmt ' chunk"], "chunks out of order",
         machine=m_wav)
    case("wav_short_fmt", put("short_fmt.wav", wav_bytes(frames, fmt_len=10)), "refused",
         [r"short_fmt\.wav", "too short"], "a 10-byte fmt chunk", machine=m_wav)
    fl = np.column_stack([base["tach"], base["x1"], base["y1"], base["v1"]]) / WAV_FULL_SCALE_V
    fl_nan = fl.copy()
    fl_nan[1234, 2] = np.nan
    case("wav_float_nan", put("float_nan.wav", wav_bytes(fl_nan, tag=3, bits=32)), "refused",
         [r"float_nan\.wav", "'ch3'", "sample 1234", "finite"], "NaN in float WAV",
         machine=m_wav)
    fl_big = fl.copy()
    fl_big[4321, 1] = 3e38
    case("wav_float_huge", put("float_huge.wav", wav_bytes(fl_big, tag=3, bits=32)),
         "refused", [r"float_huge\.wav", "'ch2'", "sample 4321", "float32|finite"],
         "3e38 in float WAV (overflows after scaling)", machine=m_wav)
    case("wav_three_channels", put("three_ch.wav", wav_bytes(frames[:, :3])), "refused",
         [r"three_ch\.wav", "'ch4'", "not in the file"], "a channel the machine file names "
         "is absent", machine=m_wav)
    case("wav_rate_conflict", put("rate_conflict.wav", good), "refused",
         [r"rate_conflict\.wav", "sample rate", "1000", "2000"],
         "the header says 1000 Hz, the machine file 2000 Hz",
         machine=machine("machine_wav_rate.toml",
                         machine_text(wav=True, data="sample_rate_hz = 2000\n")))
    def riff(*chunks: bytes) -> bytes:
        body = b"WAVE" + b"".join(chunks)
        return b"RIFF" + struct.pack("<I", len(body)) + body

    def chunk(cid: bytes, body: bytes) -> bytes:
        return cid + struct.pack("<I", len(body)) + body + (b"\0" if len(body) % 2 else b"")

    def fmt16(fs: int, nch: int = 4) -> bytes:
        return chunk(b"fmt ", struct.pack("<HHIIHH", 1, nch, fs, fs * nch * 2, nch * 2, 16))

    raw = frames.astype("<i2").tobytes()
    half = len(raw) // 2 // 8 * 8
    case("wav_two_fmt", put("two_fmt.wav", riff(fmt16(1000), fmt16(2000), chunk(b"data", raw))),
         "refused", [r"two_fmt\.wav", "second 'fmt ' chunk"],
         "two 'fmt ' chunks (1000 Hz, then 2000 Hz): which one holds is not clear",
         machine=m_wav)
    case("wav_two_data", put("two_data.wav", riff(fmt16(1000), chunk(b"data", raw[:half]),
                                                  chunk(b"LIST", b"INFOjunk"),
                                                  chunk(b"data", raw[half:]))),
         "refused", [r"two_data\.wav", "second 'data' chunk"],
         "two 'data' chunks (the second half of the samples would be dropped)", machine=m_wav)
    case("wav_clipped_probe", put("clipped.wav", wav_bytes(wav_frames(base, clip_probe=1.0))),
         "warned", [r"'ch2'", "C1-X", "clipped"],
         "probe x1 saturates at PCM full scale (usable but doubtful)", machine=m_wav)

    # ---------------------------------------------------------------- HDF5
    case("h5_empty", put("empty.h5", b""), "refused", [r"empty\.h5", "empty"], "an empty file")
    case("h5_garbage", put("garbage.h5", garbage), "refused",
         [r"garbage\.h5", "not a readable HDF5"], "binary garbage with a .h5 ending")
    h5 = (root / "good.h5").read_bytes()
    case("h5_truncated", put("truncated.h5", h5[: len(h5) // 2]), "refused",
         [r"truncated\.h5", "HDF5"], "cut in half")
    case("h5_lengths", write_hdf5(root / "lengths.h5", base, lengths={"y1": 9000}).name,
         "refused", [r"lengths\.h5", "different lengths"], "channels of different lengths")
    case("h5_no_rate", write_hdf5(root / "no_rate.h5", base, attrs={}).name, "refused",
         [r"no_rate\.h5", "sample rate"], "no rate attribute and none declared")
    case("h5_negative_rate", write_hdf5(root / "neg_rate.h5", base,
                                        attrs={"sample_rate_hz": -1000.0}).name,
         "refused", [r"neg_rate\.h5", "sample rate"], "a negative rate attribute")
    case("h5_text_rate", write_hdf5(root / "text_rate.h5", base,
                                    attrs={"sample_rate_hz": "fast"}).name,
         "refused", [r"text_rate\.h5", "sample_rate_hz"], "a rate attribute that is text")
    nanb = dict(base)
    nanb["v1"] = base["v1"].copy()
    nanb["v1"][777] = np.nan
    case("h5_nan", write_hdf5(root / "nan.h5", nanb).name, "refused",
         [r"nan\.h5", "'v1'", "sample 777", "finite"], "NaN in a dataset")
    case("h5_2d", write_hdf5(root / "two_d.h5", base,
                             extra={"matrix": np.zeros((10, 3))}).name, "refused",
         [r"two_d\.h5", "'matrix'", "1-D numeric"], "a 2-D dataset among the channels")
    case("h5_missing_group", write_hdf5(root / "no_group.h5", base).name, "refused",
         [r"no_group\.h5", "group '/run' not found"], "the declared group is absent",
         machine=machine("machine_h5_group.toml", machine_text(data='dataset = "/run"\n')))
    case("h5_missing_channel", write_hdf5(root / "missing_channel.h5", base,
                                          names=("tach", "x1", "v1")).name, "refused",
         [r"missing_channel\.h5", "'y1'", "not in the file"], "a named channel is absent")
    case("h5_rate_conflict", write_hdf5(root / "rate_conflict.h5", base).name, "refused",
         [r"rate_conflict\.h5", "sample rate", "1000", "2000"],
         "the attribute says 1000 Hz, the machine file 2000 Hz",
         machine="machine_rate2000.toml")

    # ---------------------------------------------------------------- Parquet
    case("pq_empty", put("empty.parquet", b""), "refused", [r"empty\.parquet", "empty"],
         "an empty file")
    case("pq_garbage", put("garbage.parquet", garbage), "refused",
         [r"garbage\.parquet", "not a readable Parquet"], "binary garbage with a .parquet ending")
    pqb = (root / "good.parquet").read_bytes()
    case("pq_truncated", put("truncated.parquet", pqb[: len(pqb) // 2]), "refused",
         [r"truncated\.parquet", "not a readable Parquet"], "cut in half")
    nanb = dict(base)
    nanb["tach"] = base["tach"].copy()
    nanb["tach"][2222] = np.inf
    case("pq_inf", write_parquet(root / "inf.parquet", nanb).name, "refused",
         [r"inf\.parquet", "'tach'", "sample 2222", "finite"], "an infinite tach sample")
    strs = dict(base)
    strs["x1"] = np.array([f"{v:.4f}" for v in base["x1"]])
    case("pq_text_column", write_parquet(root / "text_column.parquet", strs).name, "refused",
         [r"text_column\.parquet", "'x1'", "numeric"], "a probe column of strings")
    case("pq_no_rate", write_parquet(root / "no_rate.parquet", base,
                                     names=("tach", "x1", "y1", "v1")).name, "refused",
         [r"no_rate\.parquet", "sample rate"], "no time column, metadata or declared rate")
    case("pq_bad_meta_rate", write_parquet(root / "bad_meta.parquet", base,
                                           names=("tach", "x1", "y1", "v1"),
                                           metadata={"sample_rate_hz": "fast"}).name,
         "refused", [r"bad_meta\.parquet", "sample_rate_hz"], "a text rate in the metadata")
    case("pq_zero_meta_rate", write_parquet(root / "zero_meta.parquet", base,
                                            names=("tach", "x1", "y1", "v1"),
                                            metadata={"sample_rate_hz": "0"}).name,
         "refused", [r"zero_meta\.parquet", "sample rate"], "a zero rate in the metadata")
    back = dict(base)
    back["time_s"] = base["time_s"].copy()
    back["time_s"][6000:] -= 1.0
    case("pq_time_backwards", write_parquet(root / "time_back.parquet", back).name, "refused",
         [r"time_back\.parquet", "'time_s'", "row 6000", "increasing"],
         "time jumps back by 1 s in a later row group")
    case("pq_zero_rows", write_parquet(root / "zero_rows.parquet",
                                       {k: v[:0] for k, v in base.items()}).name, "refused",
         [r"zero_rows\.parquet", "no rows"], "a schema and no rows")
    case("pq_missing_channel", write_parquet(root / "missing_channel.parquet", base,
                                             names=("time_s", "tach", "y1", "v1")).name,
         "refused", [r"missing_channel\.parquet", "'x1'", "not in the file"],
         "a named channel is absent")

    # ---------------------------------------------------------------- MDF4
    good_mf4 = write_mdf(root / "good.mf4", base)
    case("mdf_empty", put("empty.mf4", b""), "refused", [r"empty\.mf4", "empty"],
         "an empty file")
    case("mdf_garbage", put("garbage.mf4", garbage), "refused",
         [r"garbage\.mf4", "not a readable ASAM MDF"], "binary garbage with a .mf4 ending")
    mf = good_mf4.read_bytes()
    case("mdf_truncated", put("truncated.mf4", mf[: len(mf) // 3]), "refused",
         [r"truncated\.mf4", "MDF"], "cut to a third")
    case("mdf_missing_channel", write_mdf(root / "missing_channel.mf4", base,
                                          groups=(("tach", "x1"), ("v1",))).name,
         "refused", [r"missing_channel\.mf4", "'y1'", "not in the file"],
         "a named channel is absent")
    case("mdf_two_rates", write_mdf(root / "two_rates.mf4", base, fs={1: FS / 2}).name,
         "refused", [r"two_rates\.mf4", "500 Hz", "1000 Hz", "one sample rate"],
         "the probes' channel group at half the tach's rate (no resampling between rates)")
    case("mdf_name_twice", write_mdf(root / "name_twice.mf4", base,
                                     groups=(("tach", "x1"), ("y1", "v1"), ("x1",))).name,
         "refused", [r"name_twice\.mf4", "'x1'", "channel groups 0 and 2"],
         "a channel name in two channel groups")
    case("mdf_text_channel", write_mdf(root / "text_channel.mf4", base, text="v1").name,
         "refused", [r"text_channel\.mf4", "'v1'", "expected numbers"],
         "a probe channel with a value-to-text conversion")

    # ---------------------------------------------------------------- machine description
    case("toml_syntax", "good.csv", "refused", [r"bad_syntax\.toml", "not valid TOML"],
         "a TOML syntax error", machine=machine("bad_syntax.toml", "[machine\nname = 1\n"))
    case("toml_unknown_units", "good.csv", "refused",
         [r"unknown_units\.toml", "units", "'microns'"], "a unit rundash does not know",
         machine=machine("unknown_units.toml",
                         machine_text().replace('units = "um"', 'units = "microns"', 1)))
    case("toml_unit_kind", "good.csv", "refused",
         [r"unit_kind\.toml", "'g' does not fit a proximity"], "an acceleration unit on a "
         "proximity probe", machine=machine("unit_kind.toml",
                                            machine_text().replace('units = "um"',
                                                                   'units = "g"', 1)))
    case("toml_unknown_key", "good.csv", "refused",
         [r"unknown_key\.toml", r"\[tach\]\.pulses", "unknown key"], "a misspelt key",
         machine=machine("unknown_key.toml", machine_text().replace("pulses_per_rev",
                                                                    "pulses", 1)))
    case("toml_speeds", "good.csv", "refused",
         [r"speeds\.toml", "min_operating_speed_rpm", "above"], "minimum speed above maximum",
         machine=machine("speeds.toml", machine_text().replace(
             "min_operating_speed_rpm = 2600", "min_operating_speed_rpm = 3600")))
    case("toml_negative_sensitivity", "good.csv", "refused",
         [r"neg_sens\.toml", "sensitivity_mv_per_unit", "positive"], "a negative sensitivity",
         machine=machine("neg_sens.toml", machine_text().replace("7.874", "-7.874", 1)))
    case("toml_latin1", "good.csv", "refused", [r"latin1\.toml", "UTF-8"],
         "a Latin-1 machine file (wrong text encoding)",
         machine=machine("latin1.toml", machine_text().replace(
             'bearing = "DE"', 'bearing = "Lager Süd"', 1).encode("latin-1")))
    case("toml_empty", "good.csv", "refused", [r"empty\.toml", r"\[machine\]", "missing"],
         "an empty machine file", machine=machine("empty.toml", ""))
    case("toml_garbage", "good.csv", "refused", [r"garbage\.toml", "UTF-8|TOML"],
         "binary garbage as machine file", machine=machine("garbage.toml", garbage))
    case("toml_missing", "good.csv", "refused", [r"absent\.toml", "not found"],
         "the machine file does not exist", machine="absent.toml")
    case("toml_unknown_channel", "good.csv", "refused",
         [r"good\.csv", "'x9'", "not in the file"], "the machine file names a channel the "
         "file lacks", machine=machine("unknown_channel.toml",
                                       machine_text().replace('column = "x1"',
                                                              'column = "x9"')))
    case("toml_huge", "good.csv", "refused", [r"huge\.toml", "unknown key"],
         "a 3 MB machine file of junk keys",
         machine=machine("huge.toml", machine_text().replace(
             "[tach]", "".join(f"junk_{i} = {i}\n" for i in range(200_000)) + "[tach]")))

    # ---------------------------------------------------------------- file names
    (root / "folder.csv").mkdir(exist_ok=True)
    case("name_is_folder", "folder.csv", "refused", [r"folder\.csv", "not a file"],
         "a folder whose name ends in .csv")
    case("name_dotdot", "no_such_dir/../../missing.csv", "refused",
         [r"missing\.csv", "not found"], "a path through a missing folder with '..'")
    case("name_newline", put("line\nbreak.csv", good_text), "refused",
         [r"line\\nbreak\.csv", "'x9'"], "a newline in the file name: the message stays one line "
         "(the name is shown quoted)", machine="unknown_channel.toml")
    case("name_no_suffix", put("recording", good_text), "refused",
         [r"recording", "format", "ending"], "no file ending")
    case("name_wrong_suffix", put("run.csv.bak", good_text), "refused",
         [r"run\.csv\.bak", r"'\.bak'"], "an unknown ending")
    case("name_unicode", put("-Läuf 1 (copy).csv", b""), "refused",
         [r"-Läuf 1 \(copy\)\.csv", "empty"], "spaces, brackets, a leading '-' and non-ASCII "
         "letters in the name")

    # ---------------------------------------------------------------- processing
    case("tach_flat", write_csv(root / "tach_flat.csv", signals(tach="flat")).name,
         "process_fails", [r"[Tt]oo few tach pulses|no tach", "tach"],
         "no tach pulses at all", process=True)
    case("tach_stuck_high", write_csv(root / "tach_stuck.csv", signals(tach="stuck")).name,
         "process_fails", [r"[Tt]oo few tach pulses", "tach"],
         "the tach gives a few pulses, then is stuck high", process=True)
    case("tach_noise", write_csv(root / "tach_noise.csv", signals(tach="noise")).name,
         "process_fails", [r"tach shows no plausible once-per-rev events", r"pulse intervals"],
         "a tach column carrying noise only: said so, not a sample-rate complaint at an "
         "absurd speed", process=True)
    case("constant_speed", write_csv(root / "constant_speed.csv",
                                     signals(rpm0=1500.0, rpm1=1500.0)).name,
         "process_warned", [r"no run-up or coast-down stretch"],
         "constant speed (no sweep): processed, nothing to judge, said so", process=True)
    case("tach_missing_pulses", write_csv(root / "tach_gaps.csv", signals(tach="gaps")).name,
         "process_warned", [r"TachQualityWarning", "insert|missing|repair"],
         "three once-per-rev pulses missing: repaired, warned and recorded", process=True)
    case("too_short", write_csv(root / "too_short.csv", signals(n=150)).name,
         "process_fails", [r"tach", "revolutions|pulses"], "0.15 s: fewer than four "
         "revolutions", process=True)
    flat = dict(base)
    flat["y1"] = np.full_like(base["y1"], 0.05)
    case("probe_dead", write_csv(root / "probe_dead.csv", flat).name, "warned",
         [r"'y1'", "C1-Y", "flat"], "a dead (flat) probe: warned and recorded")
    clip = dict(base)
    lim = 0.4 * np.max(np.abs(base["x1"]))
    clip["x1"] = np.clip(base["x1"], -lim, lim)
    case("probe_clipped_csv", write_csv(root / "probe_clipped.csv", clip).name, "warned",
         [r"'x1'", "C1-X", "clipped"], "a probe clipped at +-40 % of its peak")

    from tests.badinput import bounds_cases  # numbers outside physical ranges
    cases += bounds_cases.cases(root)
    return cases


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 1:
        print("usage: python tests/badinput/make_corpus.py FOLDER", file=sys.stderr)
        return 2
    cases = build(argv[0])
    for c in cases:
        print(f"{c.name:28s} {c.expect:15s} {c.data!r:40s} {c.what}")
    print(f"{len(cases)} cases in {argv[0]}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
