"""Score ``suggest`` on realistic invented exports against the mapping a person would write.

Measures the share of columns drafted as a person would map them, and counts dangerous drafts:
money on a non-money column, a name field fed by a code column, money on a weight or height.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

from integrate.mapping.load import load_canonical
from integrate.mapping.scaffold import init_workspace
from integrate.mapping.suggest import suggest_mapping

from .suite_exports import EXPECTED, HELD_OUT, build


def _decision(s) -> str:  # noqa: ANN001 - a ColumnSuggestion
    if s.role == "field":
        return str(s.field)
    return s.role  # record_id, names, address, ignore


@pytest.fixture(scope="module")
def drafted(tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict[str, object]]:
    root = tmp_path_factory.mktemp("suite")
    init_workspace(root, currency="EUR")
    out = {}
    for path in build(root / "exports"):
        draft = suggest_mapping(path, workspace=root, today=dt.date(2026, 10, 31))
        out[path.name] = {s.column: s for s in draft.columns}
    out["_canonical"] = load_canonical(root / "mappings" / "canonical.yaml", "canonical.yaml")
    return out


def test_share_of_fields_right_and_no_dangerous_drafts(drafted: dict) -> None:
    canonical = drafted["_canonical"]
    right = total = held_right = held_total = 0
    wrong, dangerous = [], []
    for name, expected in EXPECTED.items():
        columns = drafted[name]
        assert set(columns) == set(expected), name
        for column, want in expected.items():
            s = columns[column]
            got = _decision(s)
            total += 1
            right += got == want
            held_total += name in HELD_OUT
            held_right += name in HELD_OUT and got == want
            if got != want:
                wrong.append(f"{name}:{column} {got} (want {want})")
            if s.role == "field":
                ftype = canonical.fields[got].type
                wanted_type = canonical.fields[want].type if want in canonical.fields else None
                if ftype == "money" and wanted_type != "money":
                    dangerous.append(f"money on {name}:{column}")
                if ftype == "person_name" and s.profile.distinct <= 12 and wanted_type != "person_name":
                    dangerous.append(f"name on code column {name}:{column}")
    share = right / total
    print(f"suggest suite: {right} of {total} columns drafted right ({share:.1%}); held-out exports "
          f"{held_right} of {held_total}; wrong: {wrong}")
    assert not dangerous, dangerous
    assert share >= 0.85, wrong


def test_value_maps_units_formats_and_pricing_dates(drafted: dict) -> None:
    de, en, fr, js, nl, es = (drafted[n] for n in EXPECTED)
    # units: from the header where it names one, else the field's own unit when the values fit it
    assert es["peso"].options["unit"] == "kg" and es["altura_m"].options["unit"] == "m"
    assert es["sexo"].options["values"] == {"Mujer": "F", "Hombre": "M"}
    assert de["Anrede"].options["values"] == {"Frau": "F", "Herr": "M"} or \
        de["Anrede"].options["values"] == {"Herr": "M", "Frau": "F"}
    assert js["gender"].options["values"] == {"1": "M", "2": "F"} or js["gender"].options["values"] == {"2": "F",
                                                                                                        "1": "M"}
    assert de["Beitrag EUR"].options["number_format"] == "1.234,56"
    assert fr["Montant"].options["number_format"] == "1 234,56"
    assert en["Height (in)"].options["unit"] == "in" and en["Weight (lb)"].options["unit"] == "lb"
    assert en["Fee £"].options["currency"] == "GBP" and en["Fee £"].options["priced_on"] == "Paid on"
    # '12 Reed Row, Tallow, TC3 4AB': the layout in words that reads every value
    assert en["Address"].options["address_format"] == "street, town, postcode"
    assert nl["gewicht (kg)"].options["number_format"] == "1.234,56"


def test_drafts_load_and_check(drafted: dict, tmp_path: Path) -> None:
    # suggest writes a draft only when it loads against the canonical schema (suggest_mapping checks it)
    assert all(drafted[name] for name in EXPECTED)
