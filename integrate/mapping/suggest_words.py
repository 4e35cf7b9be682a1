"""Header wordings that exports use for the things a canonical schema holds (common practice).

A concept ties itself to a canonical field when one of its cue words starts one of the words of
the field's name and the field's type is one the concept allows; its phrases then count as
headers meaning that field. Headers and phrases are compared after ``normalise_header``.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass


@dataclass(frozen=True)
class Concept:
    cues: tuple[str, ...]  # words of a canonical field name that tie the concept to the field
    types: tuple[str, ...]  # canonical field types it fits
    phrases: tuple[str, ...]  # headers seen in exports, normalised


CONCEPTS: tuple[Concept, ...] = (
    Concept(("given", "first", "forename"), ("person_name",),
            ("first name", "firstname", "forename", "forenames", "given name", "given names", "christian name",
             "fname", "first", "vorname", "vornamen", "prenom", "nombre", "voornaam", "nome", "fornavn")),
    Concept(("family", "surname", "last"), ("person_name",),
            ("surname", "last name", "lastname", "family name", "lname", "last", "nachname", "familienname",
             "nom", "nom de famille", "apellido", "apellidos", "achternaam", "cognome", "efternavn")),
    Concept(("birth", "dob"), ("date",),
            ("dob", "date of birth", "birth date", "birthdate", "born", "birthday", "birth year", "year of birth",
             "geburtsdatum", "geboren", "geb datum", "date de naissance", "ne le", "fecha de nacimiento",
             "fecha nacimiento", "geboortedatum", "data di nascita")),
    Concept(("email", "mail"), ("email",),
            ("email", "e mail", "email address", "e mail address", "mail", "mail address", "e mail adresse",
             "courriel", "adresse e mail", "correo", "correo electronico")),
    Concept(("phone", "tel", "mobile"), ("phone",),
            ("phone", "telephone", "tel", "tel no", "mobile", "cell", "phone number", "contact number",
             "mobile number", "telephone number", "telefon", "telefonnummer", "handy", "mobil", "telephone",
             "portable", "telefono", "movil", "telefoon", "mobiel")),
    Concept(("postcode", "zip", "postal"), ("postcode",),
            ("postcode", "post code", "postal code", "zip", "zip code", "zipcode", "plz", "postleitzahl",
             "code postal", "cp", "codigo postal", "postcode nl")),
    Concept(("street", "address"), ("text",),
            ("street", "address", "address line 1", "address1", "street address", "addr", "home address",
             "strasse", "str", "adresse", "rue", "calle", "direccion", "straat", "adres", "anschrift")),
    Concept(("town", "city"), ("text",), ("town", "city", "ort", "wohnort", "stadt", "ville", "ciudad",
                                          "localidad", "plaats", "woonplaats", "locality")),
    Concept(("gender", "sex"), ("category",), ("gender", "sex", "geschlecht", "anrede", "salutation", "sexe",
                                               "genre", "sexo", "geslacht", "aanhef")),
    Concept(("height",), ("quantity",), ("height", "ht", "stature", "grosse", "korpergrosse", "taille", "altura",
                                         "lengte")),
    Concept(("weight",), ("quantity",), ("weight", "wt", "body weight", "mass", "gewicht", "poids", "peso")),
    Concept(("join",), ("date",), ("joined", "join date", "member since", "date joined", "joining date")),
    Concept(("annual", "membership", "subscription"), ("money",),
            ("annual fee", "membership fee", "subscription", "dues", "annual subscription")),
    Concept(("event",), ("money",),
            ("event fee", "entry fee", "course fee", "class fee", "booking fee", "registration fee", "sign up fee",
             "lesson fee")),
    Concept(("spend", "spent"), ("money",), ("spend", "total spend", "lifetime spend", "total spent", "sales")),
    Concept(("deposit",), ("money",), ("deposit", "deposit amount", "deposit paid")),
    Concept(("amount", "paid", "payment", "fee"), ("money",),
            ("amount", "amount paid", "paid", "payment", "payments", "fee", "fees", "price", "total", "betrag",
             "beitrag", "zahlung", "montant", "paiement", "importe", "pago", "bedrag", "cuota")),
)

# Header words of an identifying column.
ID_WORDS = frozenset({"id", "ref", "reference", "no", "nr", "number", "num", "code", "key"})
# Headers of a column holding whole names.
NAME_PHRASES = frozenset({"name", "full name", "fullname", "customer name", "member name", "person", "pupil name",
                          "student name", "client name", "participant"})
# Words dropped before comparing: units and currencies say how, not what.
_DROPPED = frozenset({"in", "inch", "inches", "cm", "mm", "m", "ft", "feet", "kg", "kgs", "kilos", "lb", "lbs",
                      "st", "stone", "oz", "g", "gbp", "eur", "euro", "euros", "usd", "jpy", "chf"})


def normalise_header(text: str) -> str:
    """Lower-case words of a header without punctuation, units or currencies.

    Example:
        >>> normalise_header("D.O.B."), normalise_header("Forename(s)"), normalise_header("Height (in)")
        ('dob', 'forename', 'height')
        >>> normalise_header("E-mail address"), normalise_header("Course fee €"), normalise_header("name.first")
        ('e mail address', 'course fee', 'name first')
    """
    t = text.lower().replace("(s)", "").replace("ß", "ss")
    t = "".join(ch for ch in unicodedata.normalize("NFKD", t) if not unicodedata.combining(ch))
    t = re.sub(r"(?<=\b\w)\.", "", t)  # D.O.B. -> dob, but name.first keeps its two words
    t = re.sub(r"['’]", "", t)
    words = [w for w in re.split(r"[^a-z0-9]+", t) if w and w not in _DROPPED]
    return " ".join(words)
