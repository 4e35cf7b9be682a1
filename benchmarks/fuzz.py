"""Bounded fuzzing of every reader and of the mapping-file loader.

    python benchmarks/fuzz.py --cases 2000 --seed 1

Each case builds one hostile input (byte flips, truncation, NUL bytes, BOMs, mixed newlines,
wrong delimiters, unclosed quotes, long fields, wide files, empty and header-only files,
duplicate names, bad UTF-8, broken or encrypted xlsx, JSONL arrays and scalars, YAML bombs,
paths to folders or outside the workspace) from small valid seeds, and reads it the way
``run`` and ``check`` do. The contract for every case:

- a clean error: an ``InputError`` (the CLI's exit 2) with a message and a reason; or
- success, with every unreadable cell listed as a failure;
- never another exception (a crash), never more than ``--case-seconds`` (a hang), and no
  library warning while reading (pandas warns, for one, when it drops fields it cannot place).

Prints per reader the case counts and outcomes; exits 1 if any case crashed or hung, saving
each such input under ``--save`` (default ``tests/data/fuzz/``) for a regression test.
"""

from __future__ import annotations

import argparse
import io
import json
import random
import shutil
import signal
import sqlite3
import sys
import tempfile
import time
import traceback
import warnings
import zipfile
from collections import Counter, defaultdict
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from openpyxl import Workbook

from integrate.errors import InputError, InputErrors
from integrate.mapping.load import load_canonical, load_source_mapping
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source
from integrate.sources.frame import read_failures

HEADER = ["id", "given", "family", "email", "born", "fee"]
ROWS = [["T1", "Ana", "Marsh", "ana@post.example.org", "1980-01-02", "20.50"],
        ["T2", "Bram", "Reed", "bram@post.example.org", "1975-11-30", "31"],
        ["T3", "Zoë", "Ní Bhriain", "zoe@post.example.org", "1990-06-15", "7.25"]]
CANONICAL = """\
base_currency: GBP
fields:
  given_name: {type: person_name, meaning: The given name the person uses.}
  family_name: {type: person_name, meaning: The person's family name.}
"""
MAPPING = """\
source: desk
read: {format: csv, path: desk.csv}
record_id: id
as_of: 2026-01-02
columns:
  id: ignore
  given: given_name
  family: family_name
"""


class Hang(BaseException):
    pass


# ---------------------------------------------------------------- mutations of bytes
def flip(data: bytes, rng: random.Random) -> bytes:
    out = bytearray(data)
    for _ in range(rng.randint(1, 8)):
        if out:
            out[rng.randrange(len(out))] = rng.randrange(256)
    return bytes(out)


def truncate(data: bytes, rng: random.Random) -> bytes:
    return data[: rng.randrange(len(data) + 1)] if data else data


def insert(data: bytes, rng: random.Random, piece: bytes) -> bytes:
    at = rng.randrange(len(data) + 1)
    return data[:at] + piece + data[at:]


def csv_text(rows: list[list[str]], sep: str = ",", newline: str = "\n") -> str:
    return newline.join(sep.join(r) for r in [HEADER, *rows]) + newline


def csv_cases(rng: random.Random) -> tuple[str, bytes, ReadSpec]:
    kind = rng.choice(["flip", "truncate", "nul", "bom", "newlines", "delimiter", "quote", "long_field", "wide",
                       "empty", "header_only", "duplicate_names", "bad_utf8", "encoding", "blank"])
    spec = ReadSpec(format="csv", path="desk.csv")
    base = csv_text(ROWS).encode()
    if kind == "flip":
        return kind, flip(base, rng), spec
    if kind == "truncate":
        return kind, truncate(base, rng), spec
    if kind == "nul":
        return kind, insert(base, rng, b"\x00" * rng.randint(1, 3)), spec
    if kind == "bom":
        return kind, rng.choice([b"\xef\xbb\xbf", b"\xff\xfe", b"\xfe\xff"]) + base, spec
    if kind == "newlines":
        text = "".join(rng.choice(["\n", "\r\n", "\r"]) if ch == "\n" else ch for ch in base.decode())
        return kind, text.encode(), spec
    if kind == "delimiter":
        sep = rng.choice([";", "\t", "|"])
        return kind, csv_text(ROWS, sep).encode(), spec  # the mapping still says ','
    if kind == "quote":
        return kind, insert(base, rng, b'"'), spec
    if kind == "long_field":
        size = rng.choice([100_000, 2_000_000, 10_000_000])
        rows = [r[:] for r in ROWS]
        rows[0][1] = "x" * size
        return kind, csv_text(rows).encode(), spec
    if kind == "wide":
        width = rng.choice([500, 20_000, 100_000])
        header = ",".join(f"c{i}" for i in range(width))
        return kind, (header + "\n" + ",".join("1" for _ in range(width)) + "\n").encode(), spec
    if kind == "empty":
        return kind, b"", spec
    if kind == "blank":
        return kind, rng.choice([b"\n", b"   \n\n", b"\r\n"]), spec
    if kind == "header_only":
        return kind, (",".join(HEADER) + "\n").encode(), spec
    if kind == "duplicate_names":
        return kind, csv_text(ROWS).replace("email", "given", 1).encode(), spec
    if kind == "bad_utf8":
        return kind, insert(base, rng, rng.choice([b"\xe9", b"\xc3\x28", b"\xff\xfe\xfd"])), spec
    enc = rng.choice(["cp1252", "latin-1", "utf-16", "utf-8-sig"])
    data = csv_text(ROWS).encode(enc, errors="replace")
    declared = rng.choice([enc, "utf-8"])
    return f"encoding_{enc}_as_{declared}", data, ReadSpec(format="csv", path="desk.csv", encoding=declared)


def xlsx_bytes(rows: list[list[object]]) -> bytes:
    book = Workbook()
    for row in [HEADER, *rows]:
        book.active.append(row)
    data = io.BytesIO()
    book.save(data)
    return data.getvalue()


def rezip(data: bytes, change: Callable[[bytes], bytes]) -> bytes:
    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            body = src.read(item)
            dst.writestr(item, change(body) if item.filename == "xl/worksheets/sheet1.xml" else body)
    return out.getvalue()


def xlsx_cases(rng: random.Random) -> tuple[str, bytes, ReadSpec]:
    kind = rng.choice(["flip", "truncate", "sheet_cut", "sheet_flip", "encrypted", "formula", "empty_sheet",
                       "header_only", "empty"])
    spec = ReadSpec(format="excel", path="desk.xlsx")
    base = xlsx_bytes(ROWS)
    if kind == "flip":
        return kind, flip(base, rng), spec
    if kind == "truncate":
        return kind, truncate(base, rng), spec
    if kind == "sheet_cut":
        return kind, rezip(base, lambda xml: xml[: rng.randrange(len(xml))]), spec
    if kind == "sheet_flip":
        return kind, rezip(base, lambda xml: flip(xml, rng)), spec
    if kind == "encrypted":
        return kind, b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(rng.randrange(256) for _ in range(1024)), spec
    if kind == "formula":
        rows = [r[:] for r in ROWS]
        rows[1][5] = "=F2*2"
        return kind, xlsx_bytes(rows), spec
    if kind == "empty_sheet":
        return kind, xlsx_bytes([]).replace(b"", b""), spec
    if kind == "header_only":
        return kind, xlsx_bytes([]), spec
    return kind, b"", spec


def json_cases(rng: random.Random) -> tuple[str, bytes, ReadSpec]:
    kind = rng.choice(["flip", "truncate", "array_line", "scalar_line", "deep", "nul", "bad_utf8", "empty",
                       "array_file", "wide"])
    records = [dict(zip(HEADER, r)) for r in ROWS]
    lines = [json.dumps(r, ensure_ascii=False) for r in records]
    spec = ReadSpec(format="jsonl", path="desk.jsonl")
    base = ("\n".join(lines) + "\n").encode()
    if kind == "flip":
        return kind, flip(base, rng), spec
    if kind == "truncate":
        return kind, truncate(base, rng), spec
    if kind == "array_line":
        return kind, base + b"[1, 2, 3]\n", spec
    if kind == "scalar_line":
        return kind, base + rng.choice([b"42\n", b'"text"\n', b"null\n", b"true\n"]), spec
    if kind == "deep":
        depth = rng.choice([100, 1000, 5000, 100_000])
        return kind, base + ('{"a": ' * depth + "1" + "}" * depth + "\n").encode(), spec
    if kind == "nul":
        return kind, insert(base, rng, b"\x00"), spec
    if kind == "bad_utf8":
        return kind, insert(base, rng, b"\xff"), spec
    if kind == "array_file":
        return kind, truncate(json.dumps(records).encode(), rng), ReadSpec(format="json", path="desk.jsonl")
    if kind == "wide":
        return kind, (json.dumps({f"c{i}": i for i in range(rng.choice([100, 20_000]))}) + "\n").encode(), spec
    return kind, b"", spec


def parquet_cases(rng: random.Random) -> tuple[str, bytes, ReadSpec]:
    kind = rng.choice(["flip", "truncate", "empty", "nested", "header_only"])
    spec = ReadSpec(format="parquet", path="desk.parquet")
    table = pa.table({h: [r[i] for r in ROWS] for i, h in enumerate(HEADER)})
    if kind == "nested":
        table = pa.table({"id": ["1"], "person": [{"given": "Ana", "tags": ["a", "b"]}]})
    if kind == "header_only":
        table = table.slice(0, 0)
    data = io.BytesIO()
    pq.write_table(table, data)
    base = data.getvalue()
    if kind == "flip":
        return kind, flip(base, rng), spec
    if kind == "truncate":
        return kind, truncate(base, rng), spec
    if kind == "empty":
        return kind, b"", spec
    return kind, base, spec


def sqlite_cases(rng: random.Random) -> tuple[str, bytes, ReadSpec]:
    kind = rng.choice(["flip", "truncate", "missing_table", "empty", "valid"])
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder, "db.sqlite")
        con = sqlite3.connect(path)
        con.execute("create table people (" + ", ".join(f'"{h}" text' for h in HEADER) + ")")
        con.executemany("insert into people values (?, ?, ?, ?, ?, ?)", ROWS)
        con.commit()
        con.close()
        base = path.read_bytes()
    spec = ReadSpec(format="sqlite", path="desk.sqlite", table="people")
    if kind == "flip":
        return kind, flip(base, rng), spec
    if kind == "truncate":
        return kind, truncate(base, rng), spec
    if kind == "missing_table":
        return kind, base, ReadSpec(format="sqlite", path="desk.sqlite", table="staff")
    if kind == "empty":
        return kind, b"", spec
    return kind, base, spec


READERS: dict[str, Callable[[random.Random], tuple[str, bytes, ReadSpec]]] = {
    "csv": csv_cases, "xlsx": xlsx_cases, "json": json_cases, "parquet": parquet_cases, "sqlite": sqlite_cases,
}


def mapping_case(rng: random.Random, root: Path) -> tuple[str, Path]:
    kind = rng.choice(["flip", "truncate", "control", "bomb", "deep", "folder", "outside", "bad_utf8", "empty",
                       "wide"])
    path = root / "mappings" / "desk.yaml"
    text = MAPPING.encode()
    if kind == "flip":
        path.write_bytes(flip(text, rng))
    elif kind == "truncate":
        path.write_bytes(truncate(text, rng))
    elif kind == "control":
        path.write_bytes(insert(text, rng, rng.choice([b"\x00", b"\x07", b"\x1f", b"\x7f", "\uffff".encode()])))
    elif kind == "bomb":
        lines = ['a0: &a0 ["lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol"]']
        lines += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 9) + "]" for i in range(1, 9)]
        path.write_text(MAPPING + "\n".join(lines) + "\nzzz: *a8\n")
    elif kind == "deep":
        depth = rng.choice([100, 3000, 50_000])
        path.write_text(MAPPING + "deep: " + "[" * depth + "]" * depth + "\n")
    elif kind == "folder":
        path.unlink(missing_ok=True)
        path.mkdir()
    elif kind == "outside":
        target = rng.choice(["/etc", "../../../../etc/hostname", "/dev/null", "/proc/self/status"])
        path.write_text(MAPPING.replace("path: desk.csv", f"path: {target}"))
    elif kind == "bad_utf8":
        path.write_bytes(insert(text, rng, b"\xe9"))
    elif kind == "empty":
        path.write_bytes(b"")
    else:
        path.write_text(MAPPING + "".join(f"  extra_{i}: ignore\n" for i in range(rng.choice([100, 20_000]))))
    return kind, path


def run_case(action: Callable[[], object], seconds: float) -> tuple[str, str]:
    """Outcome of one case: clean_error, recorded_failure, success, warned (a library warned while
    reading: perhaps a value lost without a word), crash or hang (and a detail)."""
    def alarm(_signum: int, _frame: object) -> None:
        raise Hang

    previous = signal.signal(signal.SIGALRM, alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    caught: list[warnings.WarningMessage] = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            result = action()
    except Hang:
        return "hang", ""
    except (InputError, InputErrors) as exc:
        text = str(exc)
        reasons = [e.reason for e in (exc.errors if isinstance(exc, InputErrors) else [exc])]
        if not text.strip() or not all(reasons):
            return "crash", f"unclear error: {text!r}"
        return "clean_error", reasons[0]
    except Exception:  # noqa: BLE001 - the point of the fuzzer
        return "crash", traceback.format_exc(limit=6)
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
    if caught:  # a library warning while reading may be a value lost without a word
        return "warned", "; ".join(sorted({f"{w.category.__name__}: {w.message}" for w in caught}))
    if isinstance(result, pd.DataFrame) and read_failures(result):
        return "recorded_failure", ""
    return "success", ""


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--cases", type=int, default=600)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--case-seconds", type=float, default=60.0, help="a case running longer is a hang")
    parser.add_argument("--save", default=str(Path(__file__).resolve().parent.parent / "tests" / "data" / "fuzz"))
    args = parser.parse_args(argv)
    rng = random.Random(args.seed)
    targets = [*READERS, "mapping"]
    counts: dict[str, Counter[str]] = defaultdict(Counter)
    kinds: dict[str, Counter[str]] = defaultdict(Counter)
    bad: list[tuple[str, str, str, bytes]] = []
    started = time.perf_counter()
    for number in range(args.cases):
        target = targets[number % len(targets)]
        case_rng = random.Random(rng.getrandbits(64))
        folder = Path(tempfile.mkdtemp(prefix="fuzz-"))
        try:
            (folder / "mappings").mkdir()
            (folder / "mappings" / "canonical.yaml").write_text(CANONICAL)
            if target == "mapping":
                (folder / "desk.csv").write_text(csv_text(ROWS))
                kind, path = mapping_case(case_rng, folder)
                canonical = load_canonical(folder / "mappings" / "canonical.yaml")

                def action(path: Path = path, folder: Path = folder, canonical: object = canonical) -> object:
                    mapping = load_source_mapping(path, canonical, "mappings/desk.yaml")  # type: ignore[arg-type]
                    return read_source(mapping.read, folder, name="desk")

                data = path.read_bytes() if path.is_file() else b""
            else:
                kind, data, spec = READERS[target](case_rng)
                (folder / str(spec.path)).write_bytes(data)

                def action(spec: ReadSpec = spec, folder: Path = folder) -> object:
                    return read_source(spec, folder, name="desk")

            outcome, detail = run_case(action, args.case_seconds)
        finally:
            shutil.rmtree(folder, ignore_errors=True)
        counts[target][outcome] += 1
        kinds[target][kind] += 1
        if outcome in ("crash", "hang", "warned"):
            bad.append((target, kind, detail, data))
    elapsed = time.perf_counter() - started
    print(f"fuzz: {args.cases} cases, seed {args.seed}, {elapsed:.1f} s "
          f"({args.cases / elapsed:.1f} cases/s), case limit {args.case_seconds:g} s")
    outcomes = ["clean_error", "recorded_failure", "success", "warned", "crash", "hang"]
    print(f"{'reader':<9}{'cases':>7}" + "".join(f"{o:>18}" for o in outcomes))
    for target in targets:
        row = counts[target]
        print(f"{target:<9}{sum(row.values()):>7}" + "".join(f"{row[o]:>18}" for o in outcomes))
    for target, kind, detail, _data in bad[:20]:
        print(f"\n{target} / {kind}:\n{detail}")
    if bad:
        save = Path(args.save)
        save.mkdir(parents=True, exist_ok=True)
        for n, (target, kind, _, data) in enumerate(bad):
            (save / f"crash-{args.seed}-{n}-{target}-{kind}.bin").write_bytes(data[:200_000])
        print(f"\n{len(bad)} crashes, hangs or warnings; inputs saved in {save}")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
