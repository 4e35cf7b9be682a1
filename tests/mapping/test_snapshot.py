"""Column snapshots: value shapes computed over code points agree with their regex definition."""

from __future__ import annotations

import re

import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.mapping.snapshot import value_shapes

_PASSES = ((re.compile(r"[A-Z]+"), "A"), (re.compile(r"[a-z]+"), "a"), (re.compile(r"\d+"), "9"),
           (re.compile(r"([^\w])\1+"), r"\1"))


def _shape_by_regex(text: str) -> str:
    """The definition of a shape, one regex pass after another."""
    for pattern, replacement in _PASSES:
        text = pattern.sub(replacement, text)
    return text


def test_shape_examples() -> None:
    values = ["Smith", "03/04/2026", "AB12 3CD", "", "--x__y..", "Ölçü 42", "٣٤/٥", "a\x00\x00b", "\ud800\ud800"]
    assert value_shapes(pd.Series(values, dtype=object)).tolist() == [_shape_by_regex(v) for v in values]


def test_shapes_keep_the_index() -> None:
    shapes = value_shapes(pd.Series(["Ab", "12"], index=[7, 3], dtype=object))
    assert shapes.index.tolist() == [7, 3]
    assert value_shapes(pd.Series([], dtype=object)).tolist() == []


# any characters, surrogates included (JSON sources can hold them), with runs that collapse
_TEXT = st.text(alphabet=st.one_of(st.characters(), st.sampled_from("Aa9 -./,_é٣")), max_size=12)


@settings(max_examples=300, deadline=None)
@given(st.lists(_TEXT, max_size=20))
def test_shapes_equal_the_regex_definition(values: list[str]) -> None:
    shapes = value_shapes(pd.Series(values, dtype=object))
    assert shapes.tolist() == [_shape_by_regex(v) for v in values]
