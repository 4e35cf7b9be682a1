"""The mapping-file formats as pydantic models: the canonical schema and one file per source.

These models are the single definition of both YAML formats; the JSON Schema files that
editors use are generated from them (``integrate schema``).
"""

from __future__ import annotations

import datetime as dt
import re
from typing import TYPE_CHECKING, Annotated, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

FieldType = Literal[
    "text",
    "person_name",
    "email",
    "phone",
    "date",
    "postcode",
    "category",
    "identifier",
    "quantity",
    "money",
]

ResolutionRule = Literal[
    "trust",  # prefer the most trusted source (lowest trust rank), then the most recent
    "most_recent",  # the value from the record with the latest record date
    "most_common",  # ties broken by trust, then recency
    "most_complete",  # the longest non-empty value; ties by trust
    "sum",  # numbers: sum over distinct records
    "min",
    "max",
    "mean",
    "all",  # keep every distinct value, joined with " | "
    "first_non_empty",  # the value of the first source in the field's 'order' that has one
]

if TYPE_CHECKING:
    from ..phone_numbers import CallingCode

_NAME = r"^[a-z][a-z0-9_]*$"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class CanonicalField(_Strict):
    """One field of the canonical schema."""

    type: FieldType
    meaning: str = Field(min_length=8, description="One sentence saying what the field means.")
    unit: str | None = Field(None, description="Canonical unit of a quantity field (pint name).")
    range: tuple[float, float] | None = Field(
        None, description="Plausible range [low, high] in the canonical unit; values outside are flagged."
    )
    compare: bool | None = Field(
        None, description="Use this field when matching records (default: yes for identifying types)."
    )
    resolve: ResolutionRule = Field("most_common", description="How the merged value is chosen.")
    region: str | None = Field(None, description="Default phone country for phone fields: ISO 3166 alpha-2 "
                               "('GB') or a calling code ('+44', or one declared under calling_codes).")
    order: list[str] | None = Field(
        None, min_length=1, description="For 'first_non_empty': source names, most preferred first "
        "(sources not listed come after them, by trust rank)."
    )
    decimals: int | None = Field(
        None, ge=0, le=10, description="Decimal places of a quantity's merged value (default 2); money always "
        "has its currency's ISO 4217 minor units."
    )
    empty_sum: Literal["empty", "zero"] = Field(
        "empty", description="For 'sum': an entity whose records carry no amount is left empty, or sums to zero."
    )
    same_transaction: list[str] | None = Field(
        None, min_length=1, description="For 'sum': records of one entity that agree on all of these are one "
        "transaction exported twice and count once. Keys: 'source', 'record_date' or canonical field names "
        "(this field's own name for the amount). Default: every record counts once."
    )

    _region = field_validator("region")(classmethod(lambda cls, v: _check_country(v)))

    @model_validator(mode="after")
    def _rule_options(self) -> CanonicalField:
        if self.resolve == "first_non_empty" and not self.order:
            raise ValueError("resolution rule 'first_non_empty' needs an 'order' (source names, most preferred first)")
        if self.order and self.resolve != "first_non_empty":
            raise ValueError(f"'order' is only for the rule 'first_non_empty', not for '{self.resolve}'")
        if self.same_transaction and self.resolve != "sum":
            raise ValueError(f"'same_transaction' is only for the rule 'sum', not for '{self.resolve}'")
        if self.resolve in ("sum", "mean") and self.type not in ("quantity", "money"):
            raise ValueError(f"rule '{self.resolve}' needs a quantity or money field, not type '{self.type}'")
        return self

    @model_validator(mode="after")
    def _unit_for_quantities(self) -> CanonicalField:
        if self.type == "quantity" and not self.unit:
            raise ValueError("a quantity field needs a canonical 'unit' (e.g. cm, kg)")
        if self.type != "quantity" and self.unit:
            raise ValueError(f"'unit' is only for quantity fields, not for type '{self.type}'")
        return self

    def is_compared(self) -> bool:
        if self.compare is not None:
            return self.compare
        return self.type not in ("money", "category")


class BlockingRule(_Strict):
    """Records sharing every key of a rule become candidate pairs.

    A key is ``field`` or ``field:transform``; ``a+b`` joins fields first. Transforms: ``exact``,
    ``soundex``, ``nysiis``, ``first3`` (any ``firstN``), ``last3`` (any ``lastN``), ``year``,
    ``month_day``, ``root`` (formal form of a given name: Bob -> robert), ``roots`` (two names'
    formal forms in sorted order, for swapped names), ``sounds`` (sorted Soundex codes of the words),
    ``initials`` (sorted first letters), ``tokens`` (sorted words).
    """

    name: str = Field(pattern=_NAME)
    keys: list[str] = Field(min_length=1)
    window: int | None = Field(
        None, ge=2, le=50,
        description="Sorted neighbourhood: sort records by the key and pair each with the next "
        "window-1 records, instead of pairing only equal keys.",
    )


class CallingCodeSpec(_Strict):
    """A telephone calling code the phone library does not know, declared with its national rules."""

    national_prefix: str = Field("0", pattern=r"^\d{0,3}$", description="Digits dialled before national "
                                 "numbers inside the country ('0'); '' for none.")
    national_digits: list[int] | None = Field(
        None, description="Lengths of national numbers without the prefix, e.g. [8, 9]; needed to read "
        "'0CC...' (the national prefix before the calling code) as international.")


def _check_country(value: str | None) -> str | None:
    if value is None:
        return value
    if not re.fullmatch(r"[A-Za-z]{2}|\+?\d{1,3}", value.strip()):
        raise ValueError(f"phone country '{value}' is not an ISO 3166 alpha-2 code ('GB') or a calling code ('+44')")
    return value.strip()


class Thresholds(_Strict):
    """Match-probability cut-offs for Fellegi–Sunter's three outcomes."""

    link: float = Field(0.8, gt=0, lt=1, description="At or above: link.")
    review: float = Field(0.2, gt=0, lt=1, description="At or above (and below link): possible link.")

    @model_validator(mode="after")
    def _ordered(self) -> Thresholds:
        if self.review > self.link:
            raise ValueError(f"review threshold {self.review} is above link threshold {self.link}")
        return self


class RatesLayout(_Strict):
    """How the rates file is laid out, when it is not the built-in ``date,from,to,rate`` CSV."""

    layout: Literal["long", "wide"] = Field(
        "long", description="'long': one row per date and currency; 'wide': one row per date, one column per "
        "currency.")
    date: str = Field("date", description="Column holding the date.")
    currency: str | None = Field(None, description="'long': column holding the currency code.")
    rate: str | None = Field(None, description="'long': column holding the rate.")
    target: str | None = Field(None, description="Column holding the target currency (default: target_currency).")
    target_currency: str | None = Field(
        None, pattern=r"^[A-Z]{3}$", description="The currency every rate is against (default: base_currency).")
    currencies: list[str] | None = Field(None, description="'wide': the currency columns (default: all but the date).")
    direction: Literal["to_target", "from_target"] = Field(
        "to_target", description="'to_target': 1 currency = rate target; 'from_target': 1 target = rate currency.")
    date_format: str | None = Field(None, description="Date format of the date column (strftime codes).")
    number_format: str | None = Field(None, description="How the rates are written, e.g. '1234,56'.")
    delimiter: str = ","
    encoding: str = "utf-8-sig"

    @model_validator(mode="after")
    def _columns(self) -> RatesLayout:
        if self.layout == "long" and not (self.currency and self.rate):
            raise ValueError("layout 'long' needs the 'currency' and 'rate' columns")
        if self.number_format is not None:
            _check_number_format(self.number_format)
        return self


class CanonicalSchema(_Strict):
    """The canonical schema plus the workspace's settings (``mappings/canonical.yaml``)."""

    schema_ref: str | None = Field(None, alias="$schema")
    base_currency: str = Field("EUR", pattern=r"^[A-Z]{3}$", description="ISO 4217 code of money fields.")
    rates: str | None = Field(None, description="Dated currency-rates CSV, relative to the workspace.")
    rates_layout: RatesLayout | None = Field(
        None, description="The rates file's own layout (columns, one row per currency or one column per currency, "
        "which way rates go); default: a CSV with the header date,from,to,rate.")
    rate_max_age_days: int = Field(
        7, ge=0, description="How many days old the nearest earlier rate may be on a pricing date; a date with "
        "none that recent stops the run (0: only a rate of that very day).")
    output: str = Field("out", description="Folder for the output tables, relative to the workspace.")
    reports: str = Field("reports", description="Folder for run reports, relative to the workspace.")
    truth: str | None = Field(
        None, description="A known-true crosswalk CSV (source, record_id, entity_id), e.g. a hand-checked "
        "sample, relative to the workspace; the run report then shows precision and recall against it.",
    )
    fields: dict[str, CanonicalField]
    blocking: list[BlockingRule] = Field(default_factory=list)
    thresholds: Thresholds = Field(default_factory=Thresholds)
    calling_codes: dict[str, CallingCodeSpec] = Field(
        default_factory=dict, description="Telephone calling codes the phone library does not know, by code "
        "('999': {national_prefix: '0', national_digits: [9]}); phone countries may then name them ('+999').")
    max_unreadable: float = Field(
        0.05, ge=0, le=1, description="Share of a mapped column's non-empty values that may be unreadable: "
        "above it a run stops (and check reports an error) naming the column; below it they go to failures.csv.")
    max_block_size: int = Field(
        1000, ge=2, description="A block with more records than this (or than 64, whichever is smaller) is not "
        "compared all against all but split by a sorted neighbourhood inside it; one warning per rule."
    )

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)

    @field_validator("calling_codes")
    @classmethod
    def _codes(cls, value: dict[str, CallingCodeSpec]) -> dict[str, CallingCodeSpec]:
        for code in value:
            if not re.fullmatch(r"\d{1,3}", code.lstrip("+")):
                raise ValueError(f"calling code '{code}' must be 1 to 3 digits")
        return {code.lstrip("+"): spec for code, spec in value.items()}

    def calling_code_plans(self) -> dict[str, CallingCode]:
        """The declared calling codes, ready for ``integrate.phone_numbers``."""
        from ..phone_numbers import CallingCode

        return {code: CallingCode(code, spec.national_prefix, tuple(spec.national_digits or ()))
                for code, spec in self.calling_codes.items()}

    @field_validator("fields")
    @classmethod
    def _field_names(cls, value: dict[str, CanonicalField]) -> dict[str, CanonicalField]:
        for name in value:
            if not re.match(_NAME, name):
                raise ValueError(f"field name '{name}' must be lower_snake_case")
        for name, spec in value.items():
            unknown = [k for k in spec.same_transaction or () if k not in value and k not in ("source", "record_date")]
            if unknown:
                raise ValueError(f"field '{name}': same_transaction key '{unknown[0]}' is not 'source', "
                                 "'record_date' or a canonical field")
        return value


def _check_number_format(name: str) -> None:
    from .numbers import number_format

    number_format(name)  # raises ValueError naming the formats it knows


class ReadSpec(_Strict):
    """Where a source lives and how to read it."""

    format: Literal["csv", "excel", "json", "jsonl", "parquet", "sqlite", "sql"]
    path: str | None = Field(None, description="File path, relative to the workspace root.")
    url: str | None = Field(None, description="SQLAlchemy URL (format 'sql').")
    encoding: str = "utf-8"
    delimiter: str = ","
    quotechar: str = '"'
    sheet: str | int | None = Field(None, description="Excel sheet name or 0-based index.")
    table: str | None = Field(None, description="Table to read (sqlite / sql).")
    query: str | None = Field(None, description="SELECT to run instead of a table (sqlite / sql).")

    @model_validator(mode="after")
    def _where(self) -> ReadSpec:
        if self.format == "sql":
            if not self.url:
                raise ValueError("format 'sql' needs a 'url' (a SQLAlchemy URL)")
        elif not self.path:
            raise ValueError(f"format '{self.format}' needs a 'path'")
        if self.format in ("sqlite", "sql") and not (self.table or self.query):
            raise ValueError("give a 'table' or a 'query' to read")
        return self


class ColumnMap(_Strict):
    """How one source column feeds the canonical schema."""

    field: str | None = Field(None, description="Canonical field this column feeds.")
    split: str | None = Field(
        None,
        description="Regular expression with named groups, one per canonical field it fills "
        "(e.g. '^(?P<family_name>[^,]+),\\s*(?P<given_name>.*)$').",
    )
    name_format: Literal["auto"] | None = Field(
        None, description="'auto': whole names in mixed layouts ('Family, Given', 'Given M. Family', single "
        "words, particles, hyphenated names) split into the two 'name_fields'.")
    name_fields: tuple[str, str] = Field(
        ("given_name", "family_name"), description="With name_format: the given-name and family-name fields.")
    address_format: str | None = Field(
        None, description="A whole address in one cell: a layout in words such as 'street, town, postcode' "
        "or 'street, postcode town', or 'auto' (the postcode recognised by its shape, the rest cut at commas).")
    address_fields: dict[Literal["street", "town", "postcode"], str] | None = Field(
        None, description="With address_format: the canonical field each part fills, e.g. "
        "{street: street, postcode: postcode}; parts not listed are dropped.")
    ignore: bool = Field(False, description="Explicitly not used.")
    format: str | None = Field(
        None, description="Date format (strftime codes, 'excel' for serial days, 'iso' for ISO 8601)."
    )
    pivot: int | None = Field(
        None, ge=0, le=100,
        description="Two-digit years (%y): yy below the pivot is 20yy, otherwise 19yy (e.g. 30).",
    )
    unit: str | None = Field(None, description="Unit of the values (quantity fields).")
    unit_column: str | None = Field(None, description="Column holding each row's unit.")
    fix_unit_slips: bool = Field(
        False, description="Quantity columns with a 'unit' and a field 'range': rows out of range in the unit "
        "but in range read in one other common unit are converted from it and named in the records' "
        "'_unit_fixes' column.")
    currency: str | None = Field(
        None, description="ISO 4217 code of the values (money fields); beside 'currency_column', the code "
        "for rows whose currency cell is blank.")
    currency_column: str | None = Field(None, description="Column holding each row's currency code.")
    number_format: str | None = Field(
        None, description="How numbers are written in this column: how 1234.56 looks ('1,234.56', "
        "'1.234,56', '1 234,56', '1\'234.56', '1234,56') or a locale such as de_DE (default: the source's).")
    priced_on: str | None = Field(
        None, description="Column with the date that prices each row (default: the source's as-of date)."
    )
    values: dict[str, str | None] | None = Field(None, description="Map of codes to canonical values.")
    country: str | None = Field(
        None, description="Phone fields: the country of numbers written without an international prefix, "
        "ISO 3166 alpha-2 ('DE') or a calling code ('+49', or one declared under calling_codes); the column's "
        "numbers are stored in E.164.")
    note: str | None = Field(None, description="What this column means in this source.")

    @model_validator(mode="after")
    def _one_target(self) -> ColumnMap:
        targets = sum([self.field is not None, self.split is not None, self.name_format is not None,
                       self.address_format is not None, self.ignore])
        if targets != 1:
            raise ValueError("give exactly one of 'field', 'split', 'name_format', 'address_format' or 'ignore: true'")
        if (self.address_format is None) != (self.address_fields is None):
            raise ValueError("'address_format' and 'address_fields' go together")
        if self.address_format and self.address_format != "auto":
            from .addresses import layout_pattern

            layout_pattern(self.address_format)  # raises ValueError for an unknown word
        if self.unit and self.unit_column:
            raise ValueError("give 'unit' or 'unit_column', not both")
        if self.number_format is not None:
            _check_number_format(self.number_format)
        _check_country(self.country)
        if self.fix_unit_slips and not self.unit:
            raise ValueError("'fix_unit_slips' needs the column's 'unit' (not 'unit_column')")
        if self.split is not None:
            try:
                pattern = re.compile(self.split)
            except re.error as exc:
                raise ValueError(f"split pattern does not compile: {exc}") from exc
            if not pattern.groupindex:
                raise ValueError("split pattern needs named groups, e.g. (?P<given_name>...)")
        return self

    def targets(self) -> list[str]:
        if self.field:
            return [self.field]
        if self.split:
            return list(re.compile(self.split).groupindex)
        if self.name_format:
            return list(self.name_fields)
        if self.address_fields:
            return list(self.address_fields.values())
        return []


ColumnEntry = Annotated[
    Union[Literal["ignore"], str, ColumnMap],
    Field(description="A canonical field name, 'ignore', or a column mapping object."),
]


class SourceMapping(_Strict):
    """One source's mapping file (``mappings/<source>.yaml``)."""

    schema_ref: str | None = Field(None, alias="$schema")
    source: str = Field(pattern=_NAME, description="Short name of the source, used in outputs.")
    read: ReadSpec
    record_id: str = Field(description="Column holding the record ID, unique within the source.")
    as_of: dt.date = Field(description="Date the export was taken.")
    trust: int = Field(5, ge=1, le=99, description="Trust rank: 1 is the most trusted source.")
    record_date: str | None = Field(
        None, description="Column dating each record (for 'most_recent'); default: the as-of date."
    )
    region: str | None = Field(None, description="Default phone country of the source: ISO 3166 alpha-2 "
                               "('GB') or a calling code ('+44', or one declared under calling_codes).")
    number_format: str | None = Field(
        None, description="How numbers are written in this source (see the column option of the same name).")
    max_unreadable: float | None = Field(
        None, ge=0, le=1, description="Share of a mapped column's values that may be unreadable before a run "
        "stops (default: the canonical schema's).")
    one_per_person: bool = Field(False, description="The source holds at most one record per person.")
    note: str | None = None
    columns: dict[str, ColumnEntry]

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)

    _region = field_validator("region")(classmethod(lambda cls, v: _check_country(v)))

    @field_validator("number_format")
    @classmethod
    def _known_format(cls, value: str | None) -> str | None:
        if value is not None:
            _check_number_format(value)
        return value

    def column_maps(self) -> dict[str, ColumnMap]:
        """Every column entry as a ColumnMap (strings expanded)."""
        out: dict[str, ColumnMap] = {}
        for column, entry in self.columns.items():
            if isinstance(entry, ColumnMap):
                out[column] = entry
            elif entry == "ignore":
                out[column] = ColumnMap(ignore=True)
            else:
                out[column] = ColumnMap(field=entry)
        return out
