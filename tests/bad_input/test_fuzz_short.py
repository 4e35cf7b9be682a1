"""A short run of the fuzzer (benchmarks/fuzz.py) in the normal suite: no crash, no hang."""

from __future__ import annotations

import importlib.util
import os
import signal
from pathlib import Path

import pytest

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source

REPO = Path(__file__).resolve().parents[2]


def _fuzz_module():  # noqa: ANN202 - the benchmark script as a module
    spec = importlib.util.spec_from_file_location("fuzz", REPO / "benchmarks" / "fuzz.py")
    module = importlib.util.module_from_spec(spec)
    assert spec.loader is not None
    spec.loader.exec_module(module)
    return module


def test_short_fuzz_has_no_crash_or_hang(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    fuzz = _fuzz_module()
    code = fuzz.main(["--cases", "300", "--seed", "11", "--case-seconds", "120", "--save", str(tmp_path)])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "300 cases" in out and not list(tmp_path.iterdir())


def test_saved_fuzz_fixtures_read_cleanly() -> None:
    """Every input the fuzzer ever saved (tests/data/fuzz/) now gives a clean error or a frame.

    sqlite-flipped-schema-text.sqlite: byte flips in the schema text made the table listing raise
    UnicodeDecodeError (fuzz seed 11). csv-flip-extra-field.csv: a flipped byte turned a line end
    into ';', so the first record had one field too many and pandas dropped it with only a
    ParserWarning (fuzz seed 23; warnings are errors in the suite, so it is caught here too).
    """
    assert list((REPO / "tests" / "data" / "fuzz").glob("*.*"))
    for path in sorted((REPO / "tests" / "data" / "fuzz").glob("*.*")):
        fmt = {".csv": "csv", ".xlsx": "excel", ".jsonl": "jsonl", ".parquet": "parquet",
               ".sqlite": "sqlite"}.get(path.suffix)
        assert fmt is not None, path
        spec = ReadSpec(format=fmt, path=path.name, table="people" if fmt == "sqlite" else None)
        try:
            read_source(spec, path.parent, name="fuzz")
        except SourceError as exc:
            assert exc.reason and exc.file


@pytest.mark.skipif(not hasattr(signal, "setitimer"), reason="needs POSIX interval timers")
def test_read_time_limit(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A read that runs past INTEGRATE_READ_SECONDS stops with a clean error (a slow reader simulated)."""
    import time

    import integrate.sources as sources

    (tmp_path / "p.csv").write_text("id\n1\n")
    monkeypatch.setenv("INTEGRATE_READ_SECONDS", "1")

    def slow(*_: object) -> None:
        end = time.monotonic() + 5
        while time.monotonic() < end:
            pass

    monkeypatch.setitem(sources._FILE_READERS, "csv", slow)
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="p.csv"), tmp_path, name="slow")
    assert caught.value.reason == "read_timeout" and "1 s" in caught.value.message
    assert os.environ["INTEGRATE_READ_SECONDS"] == "1"
