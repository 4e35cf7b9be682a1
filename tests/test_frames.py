"""The DataFrame API: field types inferred from column names and values."""

from __future__ import annotations

import pandas as pd

from integrate.frames import infer_fields


def test_types_from_names_then_values() -> None:
    frame = pd.DataFrame({
        "Surname": ["Lee", "Park"],
        "contact": ["anna@example.org", "bo@example.net"],
        "born": ["1990-01-02", "1971-05-06"],
        "tel no.": ["020 7946 0123", "+44 7700 900123"],
        "notes": ["likes kayaks", ""],
        "x": ["+44 20 7946 0999", "07700 900555"],
    })
    assert infer_fields(frame) == {"Surname": "person_name", "contact": "email", "born": "date",
                                   "tel no.": "phone", "notes": "text", "x": "phone"}
