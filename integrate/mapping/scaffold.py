"""A new workspace's starting files: ``integrate init DIR``.

The canonical schema holds the fields most person registers share, each with its type, meaning,
resolution rule and (for measures) unit and plausible range, plus blocking rules that find
candidate pairs on those fields. It is a start to edit: remove the fields no export holds, add
the ones yours do, then draft each source's mapping with ``integrate suggest``.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from ..workspace import CANONICAL_FILE, MAPPINGS_DIR
from .schema_export import MODELINE, SCHEMA_FILES, SCHEMAS_DIR, write_schemas

CANONICAL_TEXT = """\
{modeline}
# Canonical schema: the fields every source maps into, how records are matched, how each merged
# value is chosen. Drafted by `integrate init`: delete the fields no export holds, add your own.
# Merging records about people can harm them: review merges before acting on them, protect the
# personal data these files hold, and follow privacy law and your organisation's policy.
base_currency: {currency}
# rates: data/rates.csv          # dated exchange rates (date,from,to,rate), when money comes in other currencies
rate_max_age_days: 7
output: out
reports: reports

fields:
  given_name:
    type: person_name
    meaning: The given name(s) the person uses, without titles.
    resolve: most_common
  family_name:
    type: person_name
    meaning: The person's family name (surname), including particles such as 'van der'.
    resolve: most_common
  birth_date:
    type: date
    meaning: Date of birth; a year alone where a source records only the birth year.
    resolve: most_complete
  email:
    type: email
    meaning: The person's e-mail address.
    resolve: most_recent
  phone:
    type: phone
    region: {region}
    meaning: A telephone number that reaches the person, in E.164 form.
    resolve: most_recent
  street:
    type: text
    meaning: House number and street of the person's home address.
    resolve: most_recent
  town:
    type: text
    compare: false
    meaning: Town or city of the person's home address.
    resolve: most_recent
  postcode:
    type: postcode
    meaning: Postcode of the person's home address.
    resolve: most_recent
  gender:
    type: category
    meaning: Gender as recorded by the source, as one code (F, M, X).
    resolve: most_recent
  height_cm:
    type: quantity
    unit: cm
    range: [40, 250]
    meaning: Standing height in centimetres.
    resolve: most_recent
  weight_kg:
    type: quantity
    unit: kg
    range: [2, 300]
    meaning: Body weight in kilograms.
    resolve: most_recent
  amount_paid:
    type: money
    meaning: Payments made, in the base currency; separate payments add up.
    resolve: sum

# Records sharing every key of any one rule become candidate pairs.
blocking:
  - name: same_email
    keys: [email]
  - name: same_phone
    keys: [phone]
  - name: same_birth_date
    keys: [birth_date]
  - name: family_sound_birth_year
    keys: [family_name:soundex, birth_date:year]
  - name: given_sound_birth_year
    keys: [given_name:soundex, birth_date:year]
  - name: given_root_family_sound
    keys: [given_name:root, family_name:soundex]
  - name: postcode_family_start
    keys: [postcode, family_name:first2]
  - name: name_sounds           # both names misspelt alike, or written the other way round
    keys: [given_name+family_name:sounds]
  - name: family_given_initial  # the given name changed (a nickname, a second name)
    keys: [family_name, given_name:first1]
  - name: given_family_initial  # the family name changed or misspelt
    keys: [given_name, family_name:first1]
  - name: names_any_order
    keys: [given_name+family_name:roots]

thresholds:
  link: 0.8
  review: 0.2
"""


def init_workspace(folder: str | Path, *, currency: str = "EUR", region: str = "GB",
                   force: bool = False) -> list[Path]:
    """Write ``mappings/canonical.yaml``, the ``schemas/`` files and an empty ``mappings/`` into ``folder``.

    Raises:
        InputError: ``workspace_exists`` when ``folder`` already has a canonical schema (unless ``force``).
    """
    from ..outputs.tables import write_text_atomic
    from .load import load_canonical

    root = Path(folder)
    canonical_file = root / MAPPINGS_DIR / CANONICAL_FILE
    if canonical_file.exists() and not force:
        raise InputError("a workspace is already here; nothing written", file=str(canonical_file),
                         reason="workspace_exists", hint="pass --force to replace its canonical.yaml")
    canonical_file.parent.mkdir(parents=True, exist_ok=True)
    text = CANONICAL_TEXT.format(modeline=MODELINE.format(file=SCHEMA_FILES["canonical"]),
                                 currency=currency.upper(), region=region.upper())
    write_text_atomic(canonical_file, text)
    schema = load_canonical(canonical_file, f"{MAPPINGS_DIR}/{CANONICAL_FILE}")  # the scaffold must load
    written = [canonical_file, *write_schemas(root / SCHEMAS_DIR, list(schema.fields))]
    return written
