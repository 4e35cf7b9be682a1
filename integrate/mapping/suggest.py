"""Draft a mapping file for a new export: profile its columns and match each to a canonical field.

A column is matched by its header (against the field's name, the header wordings exports use for
the same thing, and the columns that already feed the field in the workspace's other mapping
files) and by its values (e-mails, phone numbers, dates, numbers that fall in the field's range
in some unit). Each choice is written with its confidence and reasons as YAML comments; columns
nothing fits are marked ``ignore`` with a TODO, for a person to decide.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass
from dataclasses import field as _default
from pathlib import Path

import pandas as pd
import pint
from rapidfuzz import fuzz

from ..errors import InputError, InputErrors
from ..sources import read_source
from ..workspace import CANONICAL_FILE, MAPPINGS_DIR, Workspace
from .addresses import split_address
from .draft import draft_read_spec, render_mapping, source_name
from .factors import unit_label
from .load import load_canonical, load_source_mapping
from .meanings import header_currency, header_unit
from .money import is_currency
from .profile import TWO_DIGIT_PIVOT, ColumnProfile, profile_frame
from .spec import CanonicalField, CanonicalSchema, SourceMapping
from .suggest_codes import code_map, gender_gate, is_gender_field
from .suggest_rules import address_layout, code_values, money_header, pricing_date, record_date_column, vetoed
from .suggest_words import CONCEPTS, ID_WORDS, NAME_PHRASES, normalise_header
from .units import resolve_unit, unit_registry

MAP_AT = 0.5  # confidence from which a column is mapped rather than left for a decision
_SYMBOLS = {"€": "EUR", "£": "GBP", "¥": "JPY", "$": "USD"}
_COMMON_UNITS = ("millimeter", "centimeter", "meter", "inch", "foot", "gram", "kilogram", "pound", "stone")
_HELD_AT = 0.45  # a held-back candidate's confidence: below MAP_AT, still named as the closest field


@dataclass
class ColumnSuggestion:
    """What the draft says about one column, and why."""

    column: str
    profile: ColumnProfile
    role: str = "ignore"  # "field", "record_id", "split", "ignore"
    field: str | None = None
    confidence: float = 0.0
    reasons: list[str] = _default(default_factory=list)
    options: dict[str, object] = _default(default_factory=dict)  # unit, currency, format, pivot, split...
    todos: list[str] = _default(default_factory=list)
    alternatives: list[tuple[str, float]] = _default(default_factory=list)
    held: dict[str, str] = _default(default_factory=dict)  # field -> why the column was not proposed for it


@dataclass
class DraftedMapping:
    path: Path
    text: str
    source: str
    columns: list[ColumnSuggestion]


def _phrases(canonical: CanonicalSchema, known_columns: dict[str, set[str]]) -> dict[str, set[str]]:
    """Header wordings that mean each canonical field."""
    out: dict[str, set[str]] = {}
    for name, spec in canonical.fields.items():
        words = set(name.split("_"))
        phrases = {normalise_header(name)} | {normalise_header(c) for c in known_columns.get(name, set())}
        for concept in CONCEPTS:
            if spec.type in concept.types and any(w.startswith(c) for w in words for c in concept.cues):
                phrases |= set(concept.phrases)
        out[name] = {p for p in phrases if p}
    return out


def _similarity(header: str, phrase: str) -> float:
    if not header or not phrase:
        return 0.0
    if header == phrase:
        return 1.0
    return max(fuzz.ratio(header, phrase), 0.8 * fuzz.token_set_ratio(header, phrase)) / 100


def _value_fit(profile: ColumnProfile, spec: CanonicalField) -> float:
    """How well the values suit the field's type, 0..1; 0 means incompatible."""
    t = spec.type
    if t == "email":
        return profile.share("email") if profile.share("email") >= 0.5 else 0.0
    if t == "phone":
        return profile.share("phone") if profile.share("phone") >= 0.5 and profile.kind() != "date" else 0.0
    if t == "postcode":
        return profile.share("postcode") if profile.share("postcode") >= 0.5 else 0.0
    if t == "date":
        share = profile.best_date_format()[1]
        return share if share >= 0.8 else 0.0
    if t == "person_name":
        return profile.share("name") if profile.share("name") >= 0.5 and profile.share("number") < 0.5 else 0.0
    if t in ("quantity", "money"):
        if profile.share("number") < 0.8:
            return 0.0
        return 1.0 if t == "money" or _unit_from_values(profile, spec) else 0.6
    if t == "category":
        if code_values(profile, profile.codes) is not None:
            return 1.0
        return 1.0 if profile.distinct <= 50 else 0.3
    if t == "identifier":
        return 1.0 if profile.is_unique else 0.5
    return 0.3 + 0.7 * profile.share("street") if profile.kind() not in ("number", "email", "date") else 0.1


def _unit_from_values(profile: ColumnProfile, spec: CanonicalField) -> tuple[str, str] | None:
    """The common unit in which the column's median falls nearest the middle of the field's range."""
    if spec.range is None or spec.unit is None or profile.numbers is None or profile.numbers[1] <= 0:
        return None
    low, high = spec.range
    target = resolve_unit(spec.unit)
    middle = math.sqrt(low * high) if low > 0 else (low + high) / 2
    fits: list[tuple[float, str, float]] = []
    for unit in _COMMON_UNITS:
        try:
            size = float(unit_registry().Quantity(1.0, unit).to(target).magnitude)
        except pint.DimensionalityError:  # another dimension: not a candidate
            continue
        converted = profile.numbers[1] * size
        if low <= converted <= high:
            fits.append((abs(math.log(converted / middle)) if middle > 0 else 0.0, unit, converted))
    if not fits:
        return None
    # the field's own unit when the values fit it: exports of a schema's users are mostly in its units
    own = [f for f in fits if f[1] == target]
    _, unit, converted = own[0] if own else min(fits)
    lo, hi = profile.numbers[0] * converted / profile.numbers[1], profile.numbers[2] * converted / profile.numbers[1]
    return unit, (f"as {unit_label(unit)} the values ({profile.numbers[0]:g} to {profile.numbers[2]:g}) give "
                  f"{lo:.4g} to {hi:.4g} {spec.unit}, inside the plausible range [{low:g}, {high:g}]")


def _score(profile: ColumnProfile, name: str, spec: CanonicalField,
           phrases: set[str]) -> tuple[float, list[str], str | None]:
    """Confidence that the column feeds the field, the reasons, and why it is held back (below MAP_AT) if it is."""
    header = normalise_header(profile.name)
    best_phrase = max(phrases, key=lambda p: _similarity(header, p), default="")
    h = _similarity(header, best_phrase)
    v = 0.0 if vetoed(profile, spec) else _value_fit(profile, spec)
    if v == 0.0:
        return 0.0, [], None
    money_word = None
    if spec.type == "money":
        lifted, money_word = money_header(profile, h, best_phrase)
        if lifted is None:
            return 0.0, [], None
        h = lifted
    if spec.type in ("quantity", "money", "date") and h < 0.5 and not (spec.type == "money" and profile.symbols):
        # numbers and dates look alike across many fields: without a word of the header for it, do not guess
        return 0.0, [], None
    confidence = 0.6 * h + 0.4 * v
    if spec.type == "category" and is_gender_field(name):
        floor, held = gender_gate(profile, h)
        if floor is None and confidence < MAP_AT:
            return confidence, [], None  # a weak candidate anyway: nothing held back to explain
        if floor is None:
            return _HELD_AT, [], held
        confidence = max(confidence, floor)
    elif spec.type == "category" and h < 0.5:
        return 0.0, [], None  # a code set the schema does not spell out: only the header can tie a column to it
    if spec.type in ("email", "postcode") and v >= 0.9:
        confidence = max(confidence, 0.6 * v)  # such values speak for themselves
    reasons = []
    if money_word:
        reasons.append(f"the header word '{money_word}' names money and the values look like amounts")
    elif h >= 0.5:
        reasons.append(f"header like '{best_phrase}' ({h:.2f})")
    kind = {"person_name": "name", "text": "street"}.get(spec.type, spec.type)
    share = profile.share(kind) if kind in profile.shares else v
    if spec.type == "date":
        share = profile.best_date_format()[1]
    reasons.append(f"{share:.0%} of values fit type {spec.type}")
    return confidence, reasons, None


def _record_id(profiles: list[ColumnProfile]) -> tuple[ColumnProfile, list[str]]:
    def idness(p: ColumnProfile) -> float:
        words = set(normalise_header(p.name).split())
        return (2.0 if p.is_unique else 0.0) + (1.0 if words & ID_WORDS else 0.0) - 0.5 * (p.share("email") > 0.5)

    best = max(profiles, key=idness)  # first column wins ties
    todos = [] if best.is_unique else [f"'{best.name}' is not unique in every row: choose the column that "
                                       "identifies a record"]
    return best, todos


def _options(s: ColumnSuggestion, spec: CanonicalField, canonical: CanonicalSchema,
             profiles: list[ColumnProfile], taken: frozenset[str] = frozenset()) -> None:
    p = s.profile
    if spec.type == "date":
        fmt, share, tied = p.best_date_format()
        if fmt:
            s.options["format"] = fmt
        if fmt == "iso":
            tied = []  # the other layouts tie only because they accept ISO dates too
        if "%y" in (fmt or ""):
            s.options["pivot"] = TWO_DIGIT_PIVOT
            s.todos.append(f"two-digit years: {TWO_DIGIT_PIVOT} reads 00-{TWO_DIGIT_PIVOT - 1} as 20yy, "
                           "the rest as 19yy; confirm")
        if tied:
            s.todos.append(f"the values read as {fmt} and as {', '.join(tied)} alike (no day above 12): "
                           "confirm which the export uses")
    if spec.type in ("quantity", "money") and p.number_format:
        s.options["number_format"] = p.number_format
        s.reasons.append(f"numbers written {p.number_format}")
    if spec.type == "quantity":
        said = header_unit(p.name)
        guessed = _unit_from_values(p, spec)
        if said:
            s.options["unit"] = _short_unit(said)
            s.reasons.append(f"the header names {unit_label(said)}")
            if guessed and guessed[0] != said:
                s.todos.append(f"the header says {unit_label(said)} but the values look like {unit_label(guessed[0])}")
        elif guessed:
            s.options["unit"] = _short_unit(guessed[0])
            s.reasons.append(guessed[1])
            s.todos.append("unit guessed from the values: confirm")
        else:
            s.options["unit"] = spec.unit
            s.todos.append(f"unit not known: set the unit the values are in (canonical: {spec.unit})")
    elif spec.type == "category" and is_gender_field(str(s.field)):
        found = code_map(p)
        if found is not None:
            s.options["values"] = found[0]
            s.reasons.append("codes drafted onto F / M / X")
            s.todos.append("check the value map (codes mapped to null are dropped)")
            if found[2]:
                s.todos.append(f"{', '.join(map(repr, found[2]))}: no known code (rare), mapped to null; correct it")
        else:
            s.todos.append("its values are no known codes: write a value map onto F / M / X")
    elif spec.type == "money":
        said = header_currency(p.name) or (_SYMBOLS.get(p.symbols) if len(p.symbols) == 1 else None)
        codes = [q for q in profiles if q.share("code") >= 0.9 and q.distinct <= 50
                 and all(is_currency(e) for e in q.examples)]
        if said:
            s.options["currency"] = said
            s.reasons.append(f"the header or values name {said}")
        elif codes:
            s.options["currency_column"] = codes[0].name
            s.reasons.append(f"'{codes[0].name}' holds currency codes")
            if codes[0].empty:  # blank cells need a fallback, or their amounts are unreadable
                s.options["currency"] = canonical.base_currency
                s.todos.append(f"{codes[0].empty_rate:.0%} of '{codes[0].name}' is blank: 'currency' is the code "
                               f"of those rows (drafted as the base currency {canonical.base_currency}); confirm")
        else:
            s.options["currency"] = canonical.base_currency
            s.todos.append(f"currency not known: set the ISO 4217 code (base currency {canonical.base_currency})")
        unknown = not said and not codes  # the user may yet set another currency: keep its pricing date ready
        foreign = s.options.get("currency", canonical.base_currency) != canonical.base_currency
        if foreign or unknown or "currency_column" in s.options:
            dated = pricing_date(profiles, p, taken)
            if dated:
                s.options["priced_on"] = dated
                s.reasons.append(f"'{dated}' beside it dates each amount (its pricing date)")
                s.todos.append(f"confirm that '{dated}' is the date each amount was paid")


def _short_unit(unit: str) -> str:
    return {"inch": "in", "centimeter": "cm", "millimeter": "mm", "meter": "m", "foot": "ft", "kilogram": "kg",
            "gram": "g", "pound": "lb", "stone": "st"}.get(unit, unit)


def match_columns(profiles: list[ColumnProfile], canonical: CanonicalSchema,
                  known_columns: dict[str, set[str]] | None = None) -> list[ColumnSuggestion]:
    """Choose the record ID and, one to one, the canonical field of every other column."""
    phrases = _phrases(canonical, known_columns or {})
    suggestions = {p.name: ColumnSuggestion(p.name, p) for p in profiles}
    id_profile, id_todos = _record_id(profiles)
    rid = suggestions[id_profile.name]
    rid.role, rid.todos, rid.confidence = "record_id", id_todos, 1.0 if id_profile.is_unique else 0.5
    rid.reasons = ["unique in every row" if id_profile.is_unique else "the most ID-like column"]
    scored: list[tuple[float, str, str, list[str]]] = []
    for p in profiles:
        if p.name == id_profile.name or normalise_header(p.name) in NAME_PHRASES:
            continue  # whole-name columns are split below, or left for a decision
        for name, spec in canonical.fields.items():
            confidence, reasons, held = _score(p, name, spec, phrases[name])
            if held:
                suggestions[p.name].held[name] = held
            if confidence > 0:
                scored.append((confidence, p.name, name, reasons))
    scored.sort(key=lambda t: (-t[0], t[1], t[2]))
    taken: set[str] = set()
    for confidence, column, name, reasons in scored:
        s = suggestions[column]
        if s.role != "ignore" or name in taken or confidence < MAP_AT:
            if s.role != "record_id" and s.field != name and confidence >= 0.3:
                s.alternatives.append((name, confidence))
            continue
        s.role, s.field, s.confidence, s.reasons = "field", name, confidence, list(reasons)
        taken.add(name)
        _options(s, canonical.fields[name], canonical, profiles,
                 frozenset(c for c, x in suggestions.items() if x.field and "birth" in x.field))
    _name_split(suggestions, canonical, taken)
    _address_split(suggestions, canonical, taken)
    for s in suggestions.values():
        held_back = s.held if s.role != "ignore" else {}  # named only as the closest field of an ignored column
        s.alternatives = [a for a in s.alternatives if a[0] != s.field and a[0] not in held_back][:2]
        if s.role == "ignore" and not s.todos:
            best = f" (closest: {s.alternatives[0][0]}, {s.alternatives[0][1]:.2f})" if s.alternatives else ""
            s.todos.append(f"decide: no canonical field fits well{best}; map it or keep it ignored")
            s.todos += [f"not proposed for {name}: {why}" for name, why in s.held.items()]
    return [suggestions[p.name] for p in profiles]


def _name_split(suggestions: dict[str, ColumnSuggestion], canonical: CanonicalSchema, taken: set[str]) -> None:
    """A whole-name column fills both name fields when neither has a column of its own."""
    given = next((n for n, f in canonical.fields.items() if f.type == "person_name" and "given" in n), None)
    family = next((n for n, f in canonical.fields.items() if f.type == "person_name" and "family" in n), None)
    if not given or not family or given in taken or family in taken:
        return
    for s in suggestions.values():
        if s.role == "ignore" and normalise_header(s.column) in NAME_PHRASES and s.profile.share("name") >= 0.5:
            s.role, s.confidence = "names", 0.6
            s.options["name_format"] = "auto"
            if (given, family) != ("given_name", "family_name"):
                s.options["name_fields"] = [given, family]
            s.reasons = ["whole names: name_format 'auto' reads 'Family, Given', 'Given M. Family', particles "
                         "and single words"]
            s.todos.append("check `integrate check` for names it could not split")
            return


def _address_split(suggestions: dict[str, ColumnSuggestion], canonical: CanonicalSchema, taken: set[str]) -> None:
    """A free-text address cell (commas and a postcode) is proposed for splitting into the address fields."""
    fields = {part: next((n for n, f in canonical.fields.items() if part in n and n not in taken
                          and f.type == ("postcode" if part == "postcode" else "text")), None)
              for part in ("street", "town", "postcode")}
    for s in suggestions.values():
        if s.role not in ("ignore", "field") or (s.role == "field" and canonical.fields[str(s.field)].type != "text"):
            continue
        sample = s.profile.examples
        if not sample or s.profile.share("name") > 0.5:
            continue
        read = [split_address(v) for v in s.profile.samples]
        share = sum(1 for r in read if r and "street" in r and "postcode" in r) / max(len(read), 1)
        if share < 0.8 or not any("," in v for v in s.profile.samples):
            continue
        if s.role == "field":
            fields["street"] = s.field
        wanted = {part: name for part, name in fields.items() if name}
        if "street" not in wanted:
            continue
        layout, fits = address_layout(s.profile.samples, set(wanted))
        if layout != "auto":  # a layout in words keeps commas inside the street ('12, Mill Lane, TC1 4AB')
            wanted = {part: name for part, name in wanted.items() if part in layout}
        s.role, s.field, s.confidence = "address", None, 0.7
        s.options = {"address_format": layout, "address_fields": wanted}
        s.reasons = [f"{share:.0%} of values are whole addresses with a postcode"]
        s.todos = ["check the split: street before the first comma, town last, postcode by its shape"
                   if layout == "auto" else f"check the split: the layout '{layout}' reads {fits:.0%} of the values"]
        taken.update(wanted.values())
        return


def suggest_mapping(source_file: str | Path, *, workspace: str | Path = ".", name: str | None = None,
                    force: bool = False, today: dt.date | None = None) -> DraftedMapping:
    """Profile ``source_file`` and write a draft ``mappings/<name>.yaml`` into ``workspace``.

    Raises:
        InputError: ``mapping_exists`` when the mapping file exists (unless ``force``); the
            source cannot be read; the workspace does not load.
    """
    root = Path(workspace)
    ws = _lenient_workspace(root)
    source = source_name(Path(source_file), name)
    target = root / MAPPINGS_DIR / f"{source}.yaml"
    if target.name == CANONICAL_FILE:
        raise InputError("a source cannot be called 'canonical'", value=source, reason="bad_name",
                         hint="give another name with --name")
    if target.exists() and not force:
        raise InputError("mapping file already exists; not overwritten", file=ws.display(target),
                         reason="mapping_exists", hint="pass --force to replace it, or --name for another file")
    spec = draft_read_spec(Path(source_file), root)
    raw = read_source(spec, root, name=source)
    profiles = profile_frame(raw)
    if not profiles:
        raise InputError("the export has no columns", file=spec.path, reason="no_columns")
    known: dict[str, set[str]] = {}
    for mapping in ws.sources:
        for column, cmap in mapping.column_maps().items():
            if cmap.field:  # a split column's header names the whole, not one field
                known.setdefault(cmap.field, set()).add(column)
    columns = match_columns(profiles, ws.canonical, known)
    as_of = today or dt.date.fromtimestamp(Path(source_file).stat().st_mtime)
    record_id = next(s.column for s in columns if s.role == "record_id")
    dated = record_date_column(profiles, {s.column for s in columns if s.field and "birth" in s.field}, record_id)
    text = render_mapping(source, spec, as_of, columns, ws.display(Path(source_file)), record_date=dated)
    _write_checked(target, text, ws.canonical)
    return DraftedMapping(target, text, source, columns)


@dataclass
class _Vocabulary:
    """The canonical schema and the source mappings that load (their columns teach header wordings)."""

    root: Path
    canonical: CanonicalSchema
    sources: list[SourceMapping]

    def display(self, path: Path) -> str:
        return Workspace(self.root, self.canonical, self.root).display(path)


def _lenient_workspace(root: Path) -> _Vocabulary:
    """The canonical schema must load; source mapping files that do not are skipped (check reports them)."""
    folder = root / MAPPINGS_DIR
    canonical_file = folder / CANONICAL_FILE
    if not canonical_file.exists():
        raise InputError(f"no {MAPPINGS_DIR}/{CANONICAL_FILE} in workspace '{root}'", file=str(canonical_file),
                         reason="not_a_workspace", hint="pass --workspace, the folder holding mappings/canonical.yaml")
    canonical = load_canonical(canonical_file, f"{MAPPINGS_DIR}/{CANONICAL_FILE}")
    sources: list[SourceMapping] = []
    for path in sorted(folder.glob("*.yaml")):
        if path.name != CANONICAL_FILE:
            try:
                sources.append(load_source_mapping(path, canonical))
            except (InputError, InputErrors):
                continue
    return _Vocabulary(root, canonical, sources)


def _write_checked(target: Path, text: str, canonical: CanonicalSchema) -> None:
    """Write the draft only if it loads: a draft that does not is a bug here, not the user's problem."""
    from ..outputs.tables import write_text_atomic

    draft = target.with_name(f".{target.stem}.draft")
    draft.write_text(text, encoding="utf-8")
    try:
        load_source_mapping(draft, canonical, str(target))
    finally:
        draft.unlink()
    write_text_atomic(target, text)


def profile_table(columns: list[ColumnSuggestion]) -> pd.DataFrame:
    """The profile and decision of every column, for printing."""
    return pd.DataFrame([{"column": s.column, "profile": s.profile.summary(),
                          "decision": s.field or s.role, "confidence": round(s.confidence, 2)} for s in columns])
