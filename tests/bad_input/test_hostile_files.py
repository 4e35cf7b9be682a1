"""Mapping files and sources built to break the readers: a clear error (exit 2), fast, never a traceback."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from tiny import assert_check_error, assert_clean_error, make_workspace, people_rows, run_cli, write_csv

from integrate.errors import MappingError, SourceError
from integrate.mapping.load import read_yaml
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source


@pytest.mark.parametrize("char", ["\x00", "\x07", "\x1f", "\x7f", "\uffff"])
def test_control_character_in_a_mapping_file(workspace: Path, char: str) -> None:
    """Reproducer: printf '# a\\x00b\\n' >> mappings/webshop.yaml gave a ruamel ReaderError traceback."""
    mapping = workspace / "mappings" / "webshop.yaml"
    lines = mapping.read_text(encoding="utf-8").count("\n")
    with mapping.open("a", encoding="utf-8") as handle:
        handle.write(f"# a{char}b\n")
    err = assert_check_error(run_cli("check", str(workspace)), f"mappings/webshop.yaml:{lines + 1}:4",
                             f"U+{ord(char):04X}", "hint")
    assert "control character" in err


def test_control_character_position() -> None:
    import tempfile

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder, "m.yaml")
        path.write_text("source: a\nread:\n  path: x\x07y.csv\n", encoding="utf-8")
        with pytest.raises(MappingError) as caught:
            read_yaml(path, "m.yaml")
    assert (caught.value.line, caught.value.column, caught.value.reason) == (3, 10, "control_character")


def _bomb(levels: int = 9) -> str:
    lines = ['a0: &a0 ["lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol"]']
    lines += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 9) + "]" for i in range(1, levels)]
    return "\n".join(lines) + "\n"


def test_billion_laughs_mapping_is_refused_at_once(workspace: Path) -> None:
    """Reproducer: a billion-laughs alias took ~50 s before its error."""
    mapping = workspace / "mappings" / "webshop.yaml"
    mapping.write_text(mapping.read_text(encoding="utf-8") + _bomb() + "extra: *a8\n", encoding="utf-8")
    with pytest.raises(MappingError) as caught:  # counted on the parsed graph, never expanded
        read_yaml(mapping, "mappings/webshop.yaml")
    assert caught.value.reason == "alias_bomb"
    assert_check_error(run_cli("check", str(workspace)), "mappings/webshop.yaml", "aliases", "hint")


@pytest.mark.parametrize("text", ["a: " + "[" * 5000 + "]" * 5000, "a: " + "{b: " * 3000 + "1" + "}" * 3000,
                                  "".join("  " * i + f"k{i}:\n" for i in range(200)) + "  " * 200 + "v\n"])
def test_deeply_nested_mapping_is_refused(tmp_path: Path, text: str) -> None:
    path = tmp_path / "m.yaml"
    path.write_text(text + "\n", encoding="utf-8")
    with pytest.raises(MappingError) as caught:
        read_yaml(path, "m.yaml")
    assert caught.value.reason == "too_deep"


def test_mapping_that_is_a_folder_or_not_utf8(workspace: Path) -> None:
    (workspace / "mappings" / "folder.yaml").mkdir()
    assert_check_error(run_cli("check", str(workspace)), "mappings/folder.yaml", "folder")
    (workspace / "mappings" / "folder.yaml").rmdir()
    (workspace / "mappings" / "latin.yaml").write_bytes(b"source: caf\xe9\n")
    assert_check_error(run_cli("check", str(workspace)), "mappings/latin.yaml:1", "UTF-8")


def test_jsonl_line_nested_1000_deep(tmp_path: Path) -> None:
    """Reproducer: a JSONL line nested 1,000 deep raised RecursionError in _parse_lines."""
    deep = '{"a": ' * 1000 + "1" + "}" * 1000
    (tmp_path / "s.jsonl").write_text('{"id": 1}\n' + deep + '\n{"id": 3}\n', encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="jsonl", path="s.jsonl"), tmp_path, name="shop")
    assert (caught.value.line, caught.value.reason) == (2, "too_deep")
    lists = "[" * 1000 + "]" * 1000
    (tmp_path / "s.jsonl").write_text('{"id": 1, "x": ' + lists + "}\n", encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="jsonl", path="s.jsonl"), tmp_path, name="shop")
    assert (caught.value.line, caught.value.reason) == (1, "too_deep")


def test_jsonl_brackets_inside_strings_are_not_nesting(tmp_path: Path) -> None:
    value = "[" * 200
    (tmp_path / "s.jsonl").write_text(json.dumps({"id": 1, "note": value}) + "\n", encoding="utf-8")
    frame = read_source(ReadSpec(format="jsonl", path="s.jsonl"), tmp_path, name="shop")
    assert frame["note"].tolist() == [value]


def test_jsonl_deep_through_the_cli(tmp_path: Path) -> None:
    root = make_workspace(tmp_path, read="{format: jsonl, path: desk.jsonl}")
    rows = [dict(zip(["id", "given", "family", "email", "born", "fee"], r)) for r in people_rows()]
    lines = [json.dumps(r) for r in rows]
    lines[3] = '{"id": "X", "given": ' + '{"a": ' * 1000 + "1" + "}" * 1000 + "}"
    (root / "desk.jsonl").write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert_clean_error(run_cli("run", str(root)), "desk.jsonl:4", "nested", "hint")


def test_100000_column_csv_is_refused_before_parsing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Reproducer: a 100,000-column CSV took 96-120 s; a column limit refuses it from its header line."""
    import pandas as pd

    header = ",".join(f"c{i}" for i in range(100_000))
    (tmp_path / "wide.csv").write_text(header + "\n" + ",".join("1" for _ in range(100_000)) + "\n")

    def no_parse(*_: object, **__: object) -> None:
        raise AssertionError("the file was parsed")

    monkeypatch.setattr(pd, "read_csv", no_parse)
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="wide.csv"), tmp_path, name="wide")
    assert caught.value.reason == "too_many_columns" and "100,000 columns" in caught.value.message


def test_column_limit_is_configurable(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    (tmp_path / "w.csv").write_text("a,b,c,d\n1,2,3,4\n")
    monkeypatch.setenv("INTEGRATE_MAX_COLUMNS", "3")
    with pytest.raises(SourceError, match="4 columns"):
        read_source(ReadSpec(format="csv", path="w.csv"), tmp_path, name="w")
    monkeypatch.setenv("INTEGRATE_MAX_COLUMNS", "0")  # no limit
    assert read_source(ReadSpec(format="csv", path="w.csv"), tmp_path, name="w").shape == (1, 5)


def test_mapping_with_100000_entries_parses_once(workspace: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Reproducer: 100,000 column entries made check re-parse the YAML for every finding (over 300 s)."""
    import integrate.mapping.load as load

    mapping = workspace / "mappings" / "webshop.yaml"
    mapping.write_text(mapping.read_text(encoding="utf-8")
                       + "".join(f"  extra_{i}: ignore\n" for i in range(2_000)), encoding="utf-8")
    parses: list[int] = []
    real = load._parse
    monkeypatch.setattr(load, "_parse", lambda data, shown: parses.append(1) or real(data, shown))
    from integrate.mapping.checks import check_workspace

    report = check_workspace(workspace, use_last_run=False)
    missing = [f for f in report.findings if f.code == "missing_column" and f.source == "webshop"]
    assert len(missing) == 2_000 and all(f.line is not None for f in missing)
    assert len(parses) <= 5  # once per mapping file (canonical + 4 sources), not once per finding


def test_empty_csv_is_one_error(tmp_path: Path) -> None:
    """Reproducer: a 0-byte CSV gave ten errors (one per mapped column) instead of 'file is empty'."""
    root = make_workspace(tmp_path)
    (root / "desk.csv").write_bytes(b"")
    err = assert_clean_error(run_cli("run", str(root)), "desk.csv", "empty (0 bytes)", "hint")
    assert "missing" not in err and "problems found" not in err
    assert_check_error(run_cli("check", str(root)), "desk.csv", "empty (0 bytes)")


def test_header_only_source_warns(tmp_path: Path) -> None:
    root = make_workspace(tmp_path)
    make_workspace(root, name="shop")
    write_csv(root / "desk.csv", people_rows())
    write_csv(root / "shop.csv", [])  # the header row only
    proc = run_cli("run", str(root))
    assert proc.returncode == 0, proc.stderr
    assert "warning: source 'shop' has no records" in proc.stderr
    proc = run_cli("check", str(root))
    assert proc.returncode == 1 and "Traceback" not in proc.stderr
    assert "warning: shop.csv: source 'shop' has no records" in proc.stdout, proc.stdout
    write_csv(root / "desk.csv", [])
    assert_clean_error(run_cli("run", str(root)), "no source has any records")


def test_jsonl_record_with_20000_keys_is_refused(tmp_path: Path) -> None:
    """Found by the fuzzer (seed 7, 'json / wide'): 20,000 keys in one record ran past the case limit."""
    (tmp_path / "w.jsonl").write_text(json.dumps({f"c{i}": i for i in range(20_000)}) + "\n", encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="jsonl", path="w.jsonl"), tmp_path, name="wide")
    assert caught.value.reason == "too_many_columns" and "20,000 columns" in caught.value.message
