"""Realistic invented exports for scoring ``suggest``, each with the mapping a person would write.

Five departments of an invented organisation, in several layouts (CSV with ',' and ';', cp1252 and
UTF-8, Excel, nested JSON lines), header languages (English, German, French, Dutch) and value
formats (decimal commas, day-first dates, salutations, whole names and addresses in one cell).
``EXPECTED`` maps each column to what a person would write: a canonical field, ``record_id``,
``ignore``, ``names`` (name_format: auto) or ``address`` (address_format).
"""

from __future__ import annotations

import json
import random
from pathlib import Path

import pandas as pd

GIVEN = ["Marta", "Ola", "Kit", "Sorley", "Ailsa", "Jonas", "Lene", "Priya", "Tomas", "Ines", "Rafe", "Noor"]
FAMILY = ["Quill", "Brightwater", "Eskdale", "Merrow", "Juniper", "Halloran", "Vessey", "Tarrant", "Okafor",
          "Lindqvist", "Dunmore", "Ashby"]
DUTCH_FAMILY = ["van der Berg", "de Wit", "Bakker", "van Dijk", "ter Horst", "Visser"]
TOWNS = ["Tallow Creek", "Ferrybridge Mill", "Lindenau", "Veendam", "Aubrac"]

EXPECTED: dict[str, dict[str, str]] = {
    "vereinsliste.csv": {
        "Mitgliedsnr": "record_id", "Anrede": "gender", "Vorname": "given_name", "Nachname": "family_name",
        "Geburtsdatum": "birth_date", "E-Mail": "email", "Telefon": "phone", "Straße": "street", "PLZ": "postcode",
        "Ort": "town", "Größe (cm)": "height_cm", "Gewicht (kg)": "weight_kg", "Beitrag EUR": "amount_paid",
        "Eintritt": "ignore", "Schuhgröße": "ignore",
    },
    "signups.xlsx": {
        "Ref": "record_id", "Name": "names", "DOB": "birth_date", "Email": "email", "Mobile": "phone",
        "Address": "address", "Sex": "gender", "Height (in)": "height_cm", "Weight (lb)": "weight_kg",
        "Fee £": "amount_paid", "Paid on": "ignore", "Level": "ignore",
    },
    "inscriptions.csv": {
        "id": "record_id", "Civilité": "gender", "Prénom": "given_name", "Nom": "family_name",
        "Date de naissance": "birth_date", "Courriel": "email", "Téléphone": "phone", "Code postal": "postcode",
        "Ville": "town", "Taille cm": "height_cm", "Poids kg": "weight_kg", "Montant": "amount_paid",
    },
    "clients.jsonl": {
        "customer.id": "record_id", "customer.first": "given_name", "customer.last": "family_name",
        "contact.email": "email", "contact.phone": "phone", "gender": "gender", "tier": "ignore",
        "shoe_size": "ignore", "spend_usd": "amount_paid", "last_order": "ignore",
    },
    "leden.csv": {
        "lidnummer": "record_id", "voornaam": "given_name", "achternaam": "family_name",
        "geboortedatum": "birth_date", "geslacht": "gender", "postcode": "postcode", "woonplaats": "town",
        "lengte (cm)": "height_cm", "gewicht (kg)": "weight_kg",
    },
    # written after the rules above were settled, and scored once without changing them (held out)
    "personal.csv": {
        "num_empleado": "record_id", "nombre": "given_name", "apellidos": "family_name",
        "fecha_nacimiento": "birth_date", "sexo": "gender", "correo": "email", "movil": "phone",
        "codigo_postal": "postcode", "ciudad": "town", "altura_m": "height_cm", "peso": "weight_kg",
        "salario": "ignore", "departamento": "ignore", "alta": "ignore",
    },
}
HELD_OUT = ("personal.csv",)


def _rows(seed: int, n: int = 40) -> list[dict[str, object]]:
    rng = random.Random(seed)
    out = []
    for i in range(n):
        female = rng.random() < 0.5
        out.append({
            "i": i, "given": rng.choice(GIVEN), "family": rng.choice(FAMILY), "female": female,
            "born": f"{rng.randint(1950, 2005)}-{rng.randint(1, 12):02d}-{rng.randint(1, 28):02d}",
            "height": round(rng.uniform(150, 195), 1), "weight": round(rng.uniform(50, 110), 1),
            "fee": round(rng.uniform(20, 2400), 2), "phone": f"07700 900{rng.randint(100, 999)}",
            "town": rng.choice(TOWNS), "house": rng.randint(1, 140), "paid": f"2026-0{rng.randint(1, 9)}-1{i % 9}",
        })
    return out


def _de_number(x: float) -> str:
    return f"{x:,.2f}".replace(",", " ").replace(".", ",").replace(" ", ".")


def _dmy(iso: str, sep: str) -> str:
    y, m, d = iso.split("-")
    return f"{d}{sep}{m}{sep}{y}"


def build(folder: Path) -> list[Path]:
    """Write the five exports into ``folder``; returns their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    rows = _rows(1)
    de = pd.DataFrame({
        "Mitgliedsnr": [f"V-{1000 + r['i']}" for r in rows],
        "Anrede": ["Frau" if r["female"] else "Herr" for r in rows],
        "Vorname": [r["given"] for r in rows], "Nachname": [r["family"] for r in rows],
        "Geburtsdatum": [_dmy(str(r["born"]), ".") for r in rows],
        "E-Mail": [f"{str(r['given']).lower()}.{r['i']}@example.org" for r in rows],
        "Telefon": [f"030 {5550000 + int(r['i']) * 37}" for r in rows],
        "Straße": [f"Mühlweg {r['house']}" for r in rows], "PLZ": [f"{10115 + int(r['i']) * 7}" for r in rows],
        "Ort": [r["town"] for r in rows], "Größe (cm)": [_de_number(float(r["height"]))[:-1] for r in rows],
        "Gewicht (kg)": [_de_number(float(r["weight"])) for r in rows],
        "Beitrag EUR": [_de_number(float(r["fee"])) for r in rows],
        "Eintritt": [_dmy(str(r["paid"]), ".") for r in rows],
        "Schuhgröße": [str(38 + int(r["i"]) % 8) for r in rows],
    })
    path = folder / "vereinsliste.csv"
    de.to_csv(path, sep=";", index=False, encoding="cp1252")
    paths.append(path)

    rows = _rows(2)
    en = pd.DataFrame({
        "Ref": [f"S{r['i']:03d}" for r in rows],
        "Name": [f"{r['family']}, {r['given']}" if r["i"] % 2 else f"{r['given']} {r['family']}" for r in rows],
        "DOB": [f"{str(r['born'])[5:7]}/{str(r['born'])[8:]}/{str(r['born'])[:4]}" for r in rows],
        "Email": [f"{str(r['family']).lower()}{r['i']}@example.com" for r in rows],
        "Mobile": [r["phone"] for r in rows],
        "Address": [f"{r['house']} Reed Row, {r['town']}, TC{1 + int(r['i']) % 9} {int(r['i']) % 10}AB" for r in rows],
        "Sex": ["F" if r["female"] else "M" for r in rows],
        "Height (in)": [f"{float(r['height']) / 2.54:.1f}" for r in rows],
        "Weight (lb)": [f"{float(r['weight']) * 2.2046:.0f}" for r in rows],
        "Fee £": [f"£{float(r['fee']) / 10:.2f}" for r in rows], "Paid on": [r["paid"] for r in rows],
        "Level": [["Beginner", "Improver", "Advanced"][int(r["i"]) % 3] for r in rows],
    })
    path = folder / "signups.xlsx"
    en.to_excel(path, index=False)
    paths.append(path)

    rows = _rows(3)
    fr = pd.DataFrame({
        "id": [str(500 + int(r["i"])) for r in rows],
        "Civilité": ["Mme" if r["female"] else "M." for r in rows],
        "Prénom": [r["given"] for r in rows], "Nom": [r["family"] for r in rows],
        "Date de naissance": [_dmy(str(r["born"]), "/") for r in rows],
        "Courriel": [f"{str(r['given']).lower()}{r['i']}@example.net" for r in rows],
        "Téléphone": [f"01 23 45 {10 + int(r['i']):02d} {int(r['i']) * 2 % 100:02d}" for r in rows],
        "Code postal": [f"{75001 + int(r['i'])}" for r in rows], "Ville": [r["town"] for r in rows],
        "Taille cm": [str(int(float(r["height"]))) for r in rows],
        "Poids kg": [f"{float(r['weight']):.1f}".replace(".", ",") for r in rows],
        "Montant": [f"{float(r['fee']):,.2f} €".replace(",", "\u202f").replace(".", ",") for r in rows],
    })
    path = folder / "inscriptions.csv"
    fr.to_csv(path, index=False, encoding="utf-8")
    paths.append(path)

    rows = _rows(4)
    path = folder / "clients.jsonl"
    with path.open("w", encoding="utf-8") as out:
        for r in rows:
            out.write(json.dumps({
                "customer": {"id": f"C-{r['i']:04d}", "first": r["given"], "last": r["family"]},
                "contact": {"email": f"{str(r['given']).lower()}.{r['family']}{r['i']}@example.org".lower(),
                            "phone": f"+44 7700 900{100 + int(r['i'])}"},
                "gender": "2" if r["female"] else "1", "tier": ["Gold", "Silver", "Bronze"][int(r["i"]) % 3],
                "shoe_size": str(36 + int(r["i"]) % 10), "spend_usd": f"{float(r['fee']):.2f}",
                "last_order": r["paid"],
            }) + "\n")
    paths.append(path)

    rows = _rows(5)
    nl = pd.DataFrame({
        "lidnummer": [str(9000 + int(r["i"])) for r in rows], "voornaam": [r["given"] for r in rows],
        "achternaam": [DUTCH_FAMILY[int(r["i"]) % len(DUTCH_FAMILY)] for r in rows],
        "geboortedatum": [r["born"] for r in rows], "geslacht": ["V" if r["female"] else "M" for r in rows],
        "postcode": [f"{1011 + int(r['i'])} AB" for r in rows], "woonplaats": [r["town"] for r in rows],
        "lengte (cm)": [f"{float(r['height']):.0f}" for r in rows],
        "gewicht (kg)": [f"{float(r['weight']):.1f}".replace(".", ",") for r in rows],
    })
    path = folder / "leden.csv"
    nl.to_csv(path, sep=";", index=False, encoding="utf-8")
    paths.append(path)

    rows = _rows(6)
    es = pd.DataFrame({
        "num_empleado": [f"E{700 + int(r['i'])}" for r in rows], "nombre": [r["given"] for r in rows],
        "apellidos": [f"{r['family']} {FAMILY[int(r['i']) % 12]}" for r in rows],
        "fecha_nacimiento": [_dmy(str(r["born"]), "/") for r in rows],
        "sexo": ["Mujer" if r["female"] else "Hombre" for r in rows],
        "correo": [f"{str(r['given']).lower()}{r['i']}@example.es" for r in rows],
        "movil": [f"6{int(r['i']) * 1234567 % 100000000:08d}" for r in rows],
        "codigo_postal": [f"{28001 + int(r['i'])}" for r in rows], "ciudad": [r["town"] for r in rows],
        "altura_m": [f"{float(r['height']) / 100:.2f}".replace(".", ",") for r in rows],
        "peso": [f"{float(r['weight']):.0f}" for r in rows],
        "salario": [_de_number(float(r["fee"]) * 10) for r in rows],
        "departamento": [["Tienda", "Alquiler", "Eventos"][int(r["i"]) % 3] for r in rows],
        "alta": [_dmy(str(r["paid"]), "/") for r in rows],
    })
    path = folder / "personal.csv"
    es.to_csv(path, sep=";", index=False, encoding="cp1252")
    paths.append(path)
    return paths
