#!/usr/bin/env python3
"""Generate the invented demo sources for the Tallow Creek Paddle & Trail Co-op.

Everything produced here is fictional: the co-op, its four departments, every
person, street, postcode, event and exchange rate.  Phone numbers come only from
ranges reserved for fiction and e-mail addresses only from reserved example
domains.

The generator builds about 5,000 true people living in households, lets each of
them appear in one to four department exports (sometimes twice in the same
one), damages every record at realistic rates (typos, nicknames, swapped name
order, missing values, moved addresses, changed phones, day/month swaps, dropped
accents, case and spacing noise, phones in each desk's formats, a relative's e-mail
and phone, records left with two or three fields) and writes:

    membership.xlsx   Membership office, sheet "Members"
    webshop.csv       Web shop customers
    rentals.jsonl     Rentals desk, one JSON object per line
    events.sqlite     Events team, table "signups"
    rates.csv         invented dated exchange rates (EUR/USD -> GBP)
    truth/crosswalk.csv      which record belongs to which true person (twins marked)
    truth/entities.csv       the true people, including money totals in GBP
    truth/record_faults.csv  which faults were applied to each record

Output is byte-for-byte deterministic for a given seed.

Usage:  python demo_sources/generate.py [--out DIR]
"""
from __future__ import annotations

import argparse
import csv
import datetime as dt
import io
import json
import re
import sqlite3
import unicodedata
import zipfile
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import numpy as np
import openpyxl
from openpyxl.styles import Font

SEED = 20261202
N_PEOPLE = 5000

BIRTH_FIRST = dt.date(1940, 1, 1)
BIRTH_LAST = dt.date(2010, 12, 31)
JOIN_FIRST = dt.date(2005, 1, 1)
ACTIVITY_FIRST = dt.date(2024, 1, 1)  # web orders, rentals and events start here
ACTIVITY_LAST = dt.date(2026, 10, 31)
RATES_FIRST = dt.date(2023, 12, 1)
RATES_LAST = dt.date(2026, 11, 30)
FIXED_FILE_TIME = dt.datetime(2026, 12, 2, 0, 0, 0)  # stamped into the xlsx

SOURCES = ("membership", "webshop", "rentals", "events")
# How many departments a person appears in (1..4) and how attractive each one is.
N_SOURCES_PROB = (0.50, 0.31, 0.14, 0.05)
SOURCE_WEIGHT = {"membership": 0.34, "webshop": 0.30, "rentals": 0.20, "events": 0.16}
# Chance that a person known to a department is registered there a second time.
WITHIN_SOURCE_DUP = {"membership": 0.045, "webshop": 0.05, "rentals": 0.06, "events": 0.04}

# Per-record fault rates by source.  "missing_*" rates are on top of values the
# person simply does not have (no e-mail, no phone).
FAULTS = {
    "membership": {
        "typo_given": 0.025, "typo_family": 0.025, "nickname": 0.04, "swap_names": 0.015,
        "drop_accents": 0.30, "punctuation": 0.20, "case": 0.03, "spaces": 0.04, "dm_swap": 0.02,
        "first_given_only": 0.10, "missing_birth": 0.03, "missing_phone": 0.05,
        "missing_address": 0.03, "missing_height": 0.10, "street_style": 0.10,
        "postcode_style": 0.03, "landline_instead": 0.20,
    },
    "webshop": {
        "typo_given": 0.035, "typo_family": 0.035, "nickname": 0.12, "swap_names": 0.02,
        "drop_accents": 0.60, "punctuation": 0.25, "case": 0.07, "spaces": 0.05, "dm_swap": 0.02,
        "first_given_only": 0.80, "missing_birth": 0.55, "missing_phone": 0.08,
        "landline_in_mobile": 0.40, "missing_email": 0.02, "email_case": 0.04,
        "postcode_style": 0.25, "missing_postcode": 0.05,
    },
    "rentals": {
        "typo_given": 0.05, "typo_family": 0.05, "nickname": 0.10, "swap_names": 0.03,
        "drop_accents": 0.50, "punctuation": 0.25, "case": 0.05, "spaces": 0.04, "dm_swap": 0.05,
        "first_given_only": 0.85, "missing_birth": 0.20, "missing_phone": 0.08,
        "missing_title": 0.25, "missing_height": 0.12, "missing_weight": 0.18,
    },
    "events": {
        "typo_given": 0.04, "typo_family": 0.04, "nickname": 0.15, "swap_names": 0.02,
        "drop_accents": 0.50, "punctuation": 0.25, "case": 0.08, "spaces": 0.05,
        "first_given_only": 0.85, "missing_birth": 0.35, "missing_email": 0.12,
        "email_case": 0.04,
    },
}
# Share of records (per source) that hold only two or three of the person fields: a walk-in
# sign-up, a guest order, a desk booking taken over the phone.  The membership office checks a
# document, so its records are rarely that thin.
SPARSE = {"membership": 0.01, "webshop": 0.04, "rentals": 0.03, "events": 0.05}
# How each desk writes a phone number (style: weight; see phone_format).  A person's number
# therefore looks different from one department to the next.
PHONE_STYLES = {
    "membership": {"local": 0.80, "local_compact": 0.08, "dashes": 0.07, "intl_trunk": 0.05},
    "webshop": {"intl": 0.55, "intl_compact": 0.20, "local": 0.10, "intl_trunk": 0.10, "intl_00": 0.05},
    "rentals": {"local": 0.20, "local_compact": 0.20, "intl": 0.15, "parens": 0.15, "intl_00": 0.10,
                "dashes": 0.08, "dots": 0.06, "no_trunk": 0.06},
}
# Household members whose records sometimes give another member's e-mail and phone (a child
# booking with a parent's contact details, a partner with the other's): the chance that a person
# borrows a contact at all, and the chance per record that a borrower's record shows it.
BORROWS_CONTACT = {"partner": 0.12, "child": 0.30, "twin": 0.45}
BORROWED_PER_RECORD = 0.5        # when the person has an e-mail or mobile of their own
BORROWED_PER_RECORD_NONE = 0.85  # when they have neither
# Twins: the chance that a family with children has a pair of twins among them, and the chance
# that twins share the first given name (told apart by their second given names).
TWIN_FAMILY = 0.36
TWIN_SAME_FIRST_NAME = 0.05
MEMBERSHIP_INCH_SLIPS = 3  # membership heights typed in inches
RENTALS_CM_SLIPS = 2       # rentals heights typed in centimetres

# --------------------------------------------------------------------------
# Invented word lists.  "Name*N" gives the word N times the usual weight.
# --------------------------------------------------------------------------

GIVEN_FEMALE = """
Anna*5, Sarah*7, Emma*6, Olivia*3, Sophie*3, Chloé*2, Zoë*2, Renée, Elizabeth*5,
Margaret*4, Katherine*3, Catherine*3, Jennifer*3, Patricia*2, Susan*3, Deborah*2,
Rebecca*3, Samantha*2, Victoria*2, Alexandra*2, Christine*2, Josephine, Jacqueline,
Abigail, Eleanor*2, Penelope, Isabella*2, Dorothy, Gwendolyn, Frances, Mary*4, Helen*3,
Ruth*2, Alice*2, Grace*2, Lucy*3, Hannah*3, Charlotte*3, Amelia*2, Emily*3, Jessica*2,
Laura*4, Rachel*2, Claire*2, Fiona*2, Niamh, Siobhán, Aoife, Orla, Máiréad, Eilidh,
Morag, Catriona, Isla, Freya, Ingrid, Astrid, Sigrid, Maja, Elin, Greta, Heidi,
Katarzyna, Agnieszka, Małgorzata, Zofia, Marta, Ewa, Giulia, Chiara, Francesca, Lucía,
María, Carmen, Inés, Pilar, Beatriz, Ana, Marisol, Priya*2, Anjali, Deepa, Kavita,
Sunita, Aisha*2, Fatima*2, Leila, Yasmin, Noor, Amira, Mei, Lian, Xiu, Yuki, Hana,
Aiko, Ngozi, Chioma, Adaeze, Funmilayo, Amara, Zainab, Nadia, Irina, Olga, Svetlana,
Tatiana, Hélène, Éloïse, Margot, Camille, Amélie, Léa, Manon, Gemma, Kerry, Tracey,
Nicola*2, Joanne*2, Donna, Julie*2, Karen*2, Linda*2, Barbara, Carol, Janet, Sandra,
Pauline, Valerie, Wendy, Brenda, Sheila, Maureen, Gillian, Louise*2, Natalie, Kirsty,
Megan*2, Bethan, Ffion, Carys, Seren, Rhiannon, Ellie*2, Poppy, Daisy, Rosie, Molly,
Phoebe, Imogen, Harriet, Matilda, Evie, Ava*2, Mia*2, Lily*2, Ruby*2, Zara, Maya,
Nina, Vera, Edith, Ivy, Florence, Beatrice, Theresa, Monique
"""

GIVEN_MALE = """
James*8, John*6, Robert*5, William*5, Michael*5, Thomas*5, Alexander*3, Richard*4,
Edward*3, Christopher*4, Daniel*4, Joseph*3, Samuel*3, Benjamin*3, Matthew*4,
Nicholas*2, Jonathan*2, Anthony*2, Andrew*4, Charles*2, Frederick, Henry*2, Stephen*3,
Steven*2, Peter*3, Timothy, David*7, Gregory, Theodore, Zachary, Lawrence, Raymond,
Ronald, Donald, Kenneth, Gerald, Francis, George*3, Paul*4, Mark*3, Simon*2, Adam*2,
Oliver*3, Harry*2, Jack*3, Oscar, Leo, Arthur, Alfie, Noah, Ethan, Lewis, Callum,
Ewan, Hamish, Angus, Alasdair, Rhys, Dafydd, Gareth, Owain, Iwan, Seán, Séamus,
Ciarán, Declan, Pádraig, Eoin, Cormac, Björn, Lars, Erik, Nils, Anders, Henrik, Sven,
Jens, Piotr, Tomasz, Krzysztof, Paweł, Marek, Jakub, Luca, Marco, Giovanni, Matteo,
Alessandro, José*2, Carlos, Javier, Miguel, Andrés, Raúl, Diego, Pablo, Rajesh,
Arjun, Vikram, Sanjay, Rohan, Amit, Omar*2, Ahmed*2, Yusuf, Tariq, Hassan, Karim,
Wei, Jun, Hao, Kenji, Hiroshi, Takeshi, Chinedu, Emeka, Oluwaseun, Tunde, Kwame,
Kofi, Dmitri, Sergei, Ivan, Mikhail, François, Étienne, Jérôme, Benoît, Théo, Hugo,
Louis, Antoine, Gavin, Darren, Wayne, Craig, Neil, Keith, Brian*2, Colin, Derek,
Trevor, Graham, Malcolm, Nigel, Barry, Dennis, Roy, Stanley, Albert, Walter, Ernest,
Harold, Leonard, Cyril, Felix, Max, Finn, Jasper, Rory, Toby, Luke*2, Ryan*2, Kieran,
Connor
"""

GIVEN_ANY = """
Alex, Sam, Jamie, Jordan, Morgan, Casey, Robin, Avery, Riley, Quinn, Charlie,
Frankie, Jesse, Rowan, Sasha, Kim, Ashley, Eden, River, Remy
"""

FAMILY_NAMES = """
Smith*25, Jones*18, Brown*15, Taylor*15, Williams*12, Wilson*10, Davies*6, Evans*6,
Thomas*5, Johnson*6, Roberts*5, Walker*4, Wright*4, Robinson*4, Thompson*4, White*4,
Hughes*4, Edwards*4, Green*4, Hall*3, Wood*3, Harris*3, Lewis*3, Martin*3, Jackson*3,
Clarke*3, Clark*2, Turner*2, Hill*2, Scott*2, Cooper*2, Morris*2, Ward*2, Moore*2,
King*2, Watson*2, Baker*2, Harrison*2, Morgan, Patel*10, Young, Allen, Mitchell,
James, Anderson, Phillips, Lee*2, Bell, Parker, Davis, Price, Bennett, Griffiths,
Kelly*3, Cook, Carter, Shaw, Richardson, Collins, Chapman, Marshall, Ellis, Adams,
Mason, Murphy*5, Graham, Campbell*3, Stewart*3, Murray, Reid, Fraser, MacDonald*3,
McKenzie, Ross, Henderson, Paterson, Hamilton, Kerr, Sinclair, Gordon, Burns,
Kennedy, Cunningham, Byrne, Ryan, O'Brien*2, O'Connor*2, O'Neill, Doyle, Gallagher,
Walsh, McCarthy, Quinn, Nolan, Kavanagh, Ní Bhriain, Ó Súilleabháin, Mac an Bhaird,
Llewellyn, Pritchard, Vaughan, Bowen, Jenkins, Powell, Rees, Owen, Lloyd, Howells,
ap Gwilym, Van der Berg*3, Van Dijk, de Vries, Janssen, Bakker, Visser, Smit,
de Jong, Van den Heuvel, Müller*2, Schmidt, Schneider, Fischer, Weber, Becker,
Hoffmann, Schäfer, Koch, Richter, Klein, Wolf, Schröder, Neumann, Zimmermann, Krüger,
Hartmann, Lange, Nyström, Lindqvist, Johansson, Andersson, Karlsson, Nilsson,
Eriksson, Larsen, Hansen, Pedersen, Jensen, Sørensen, Kowalski*2, Nowak*2,
Wiśniewski, Wójcik, Lewandowski, Zieliński, Szymański, Woźniak, Dąbrowski, Łukasik,
Rossi, Russo, Ferrari, Esposito, Bianchi, Romano, Colombo, Ricci, Marino, Greco,
Bruno, Gallo, Conti, De Luca, García*3, Rodríguez*2, Martínez*2, López, González,
Hernández, Pérez, Sánchez, Ramírez, Torres, Flores, Díaz, De la Cruz, Da Silva*2,
Dos Santos, Ferreira, Pereira, Oliveira, Costa, Sousa, Dubois, Lefèvre, Moreau,
Laurent, Girard, Bonnet, Dupont, Lambert, Fontaine, Rousseau, Vincent, Leroy,
Fournier, Mercier, Chevalier, Le Gall, Le Roux, Singh*7, Kaur*3, Sharma*3, Gupta*2,
Khan*7, Ahmed*3, Ali*3, Hussain*3, Shah*2, Begum*2, Rahman*2, Chowdhury, Iyer, Nair,
Reddy, Menon, Das, Bose, Mehta, Chen*5, Wang*3, Li*3, Zhang*2, Liu*2, Huang, Zhao,
Wu, Zhou, Lin, Tan, Lim, Ng, Wong*2, Chan*2, Leung, Nguyen*4, Tran*2, Pham, Kim*2,
Park, Choi, Sato, Suzuki, Takahashi, Tanaka, Watanabe, Okafor, Okonkwo, Adeyemi,
Balogun, Mensah, Owusu, Boateng, Nwosu, Eze, Abubakar, Haddad, Khoury, Nasser, Aziz,
El-Amin, Al-Farsi, Ivanov, Petrov, Smirnov, Popescu, Ionescu, Horvat, Novak, Kovács,
Nagy, Szabó, Papadopoulos, Georgiou, Yilmaz, Demir, Kaya, Smith-Jones*2, Taylor-Reed,
Brown-Hughes, Lloyd-Evans, Ashworth-Hale, Carter-Blake, Harding-Fox, Wynn-Parry,
St John, Fitzgerald, FitzWilliam, McAllister, MacLeod, McIntyre, Abbott, Archer,
Atkinson, Bailey, Barker, Barnes, Bates, Beck, Berry, Bird, Blake, Booth, Bradley,
Briggs, Brooks, Bull, Burke, Butler, Cartwright, Chambers, Cole, Cross, Dale,
Dawson, Day, Dixon, Duncan, Fisher, Fleming, Ford, Foster, Fox, Gibson, Goodwin,
Grant, Gray, Hardy, Harper, Hart, Hayes, Holmes, Hopkins, Howard, Hunt, Hunter,
Jordan, Knight, Lamb, Lane, Lawson, Little, Lowe, Lucas, Marsh, May, Miles, Mills,
Moss, Newman, Nichols, Norton, Oakley, Page, Palmer, Pearce, Pearson, Porter, Potter,
Read, Reynolds, Rose, Russell, Saunders, Sharp, Short, Simpson, Slater, Spencer,
Stone, Sutton, Swift, Thornton, Tucker, Wade, Wallace, Walters, Warren, Webb, Wells,
West, Wheeler, Whitehead, Wilkinson, Willis, Woods, Yates, Crowther, Ellwood,
Fairbairn, Garside, Haworth, Illingworth, Kershaw, Lumb, Midgley, Ormerod, Pickles,
Rigby, Sugden, Thwaite, Utley, Whiteley, Ackroyd, Birtwistle, Crabtree, Dewhurst,
Entwistle, Fothergill, Greenhalgh, Hargreaves, Holroyd, Lister, Tallowby, Creekmore,
Ferriby, Osierfield, Kestleton, Marrowby, Quillan, Rushworth, Penhallow, Treloar,
Trevithick, Polglase, Annear, Rowe, Nance, Jago, Mabey, Dunmore, Ashby
"""

# Nicknames an official given name is often replaced by (first given name only).
NICKNAMES = {
    "Robert": ["Bob", "Rob", "Bobby"], "Elizabeth": ["Liz", "Beth", "Lizzie"],
    "William": ["Bill", "Will", "Billy"], "Katherine": ["Kate", "Kathy", "Katie"],
    "Catherine": ["Cathy", "Kate", "Cath"], "Margaret": ["Maggie", "Peggy", "Meg"],
    "James": ["Jim", "Jimmy", "Jamie"], "Michael": ["Mike", "Mick"],
    "Thomas": ["Tom", "Tommy"], "Jennifer": ["Jen", "Jenny"],
    "Alexander": ["Alex", "Sandy"], "Alexandra": ["Alex", "Sandra"],
    "Richard": ["Rick", "Richie", "Dick"], "Edward": ["Ed", "Ted", "Eddie"],
    "Christopher": ["Chris", "Kit"], "Christine": ["Chris", "Chrissie"],
    "Daniel": ["Dan", "Danny"], "Joseph": ["Joe", "Joey"], "Samuel": ["Sam"],
    "Samantha": ["Sam", "Sammy"], "Benjamin": ["Ben", "Benji"], "Matthew": ["Matt"],
    "Nicholas": ["Nick", "Nicky"], "Jonathan": ["Jon", "Jonny"],
    "Anthony": ["Tony", "Ant"], "Andrew": ["Andy", "Drew"], "Charles": ["Charlie", "Chas"],
    "Frederick": ["Fred", "Freddie"], "Henry": ["Harry", "Hal"],
    "Stephen": ["Steve"], "Steven": ["Steve"], "Peter": ["Pete"], "Timothy": ["Tim"],
    "David": ["Dave", "Davy"], "Gregory": ["Greg"], "Theodore": ["Theo", "Ted"],
    "Zachary": ["Zach"], "Lawrence": ["Larry", "Laurie"], "Raymond": ["Ray"],
    "Ronald": ["Ron", "Ronnie"], "Donald": ["Don"], "Kenneth": ["Ken", "Kenny"],
    "Gerald": ["Gerry"], "Francis": ["Frank"], "Patricia": ["Pat", "Trish"],
    "Susan": ["Sue", "Susie"], "Deborah": ["Debbie", "Deb"], "Rebecca": ["Becky", "Bex"],
    "Victoria": ["Vicky", "Tori"], "Josephine": ["Jo", "Josie"],
    "Jacqueline": ["Jackie"], "Abigail": ["Abby"], "Eleanor": ["Ellie", "Nell"],
    "Penelope": ["Penny"], "Isabella": ["Bella", "Izzy"], "Dorothy": ["Dot", "Dottie"],
    "Gwendolyn": ["Gwen"], "Frances": ["Fran"], "Jessica": ["Jess"],
    "Charlotte": ["Lottie", "Charlie"], "Emily": ["Em"], "Natalie": ["Nat"],
    "Nicola": ["Nicky"], "José": ["Pepe"], "Oluwaseun": ["Seun"],
    "Funmilayo": ["Funmi"], "Małgorzata": ["Gosia"], "Katarzyna": ["Kasia"],
    "Dmitri": ["Dima"], "Mikhail": ["Misha"],
}

STREET_WORDS = """
Willow, Kestrel, Heron, Alder, Bracken, Otter, Larch, Sedge, Tallow, Ferry, Mill,
Weir, Lantern, Copper, Flint, Kingfisher, Curlew, Plover, Osier, Reed, Bramble,
Hazel, Juniper, Thistle, Foxglove, Meadowsweet, Marsh, Lock, Wharf, Quarry, Chapel,
Orchard, Beacon, Gorse, Heather, Moss, Coppice, Pebble, Shingle, Drover, Packhorse,
Tanner, Ropewalk, Boatyard, Paddle, Oarsman, Eddy, Riffle, Sandpiper, Dipper,
Wagtail, Teasel, Campion, Sorrel, Yarrow, Burdock, Cobble, Millrace, Sluice,
Towpath, Saltings, Creekside, Fernhill, Stonechat, Skylark, Linnet, Bulrush,
Water Mint, Little Heron, Old Ferry
"""
STREET_TYPES = ("Row", "Lane", "Road", "Street", "Close", "Way", "Terrace", "Drive",
                "Gardens", "Walk", "Mews", "Crescent", "Place", "Hill", "Court",
                "Green", "View", "Rise")
STREET_ABBREVIATIONS = {"Road": "Rd", "Street": "St", "Lane": "Ln", "Drive": "Dr",
                        "Close": "Cl", "Terrace": "Ter", "Crescent": "Cres",
                        "Gardens": "Gdns", "Place": "Pl", "Court": "Ct"}
POSTCODE_AREAS = ("TC", "TK")
INWARD_LETTERS = "ABDEFGHJLNPQRSTUWXYZ"

EMAIL_DOMAINS = ("example.com", "example.org", "example.net", "mail.example.com",
                 "post.example.org", "inbox.example.net")

# Invented event programme: (name, standard fee in GBP).
EVENT_TYPES = (
    ("Moonlight Paddle", "12.50"), ("Ridge Run 10k", "18.00"),
    ("Creek Clean-Up Day", "0.00"), ("Dawn Chorus Walk", "5.00"),
    ("Beginners' Kayak Clinic", "35.00"), ("Winter Solstice Hike", "8.00"),
    ("Tallow Creek Triathlon", "42.00"), ("Map and Compass Workshop", "15.00"),
    ("Family Canoe Day", "10.00"), ("Heron Point Open Swim", "7.50"),
    ("Autumn Trail Half Marathon", "28.00"), ("Bothy Overnighter", "24.00"),
    ("Stand-Up Paddle Taster", "20.00"), ("Gorge Scramble", "22.50"),
    ("Members' Annual Gathering", "0.00"), ("Night Navigation Challenge", "16.00"),
)

# Membership fees in GBP (standard, plus = with boat storage, concession);
# the fees went up in 2015.
MEMBERSHIP_FEES = {
    "before_2015": {"standard": "40.00", "plus": "55.00", "concession": "20.00"},
    "from_2015": {"standard": "45.00", "plus": "60.00", "concession": "25.00"},
}

DEPOSIT_AMOUNTS = {
    "GBP": (20, 25, 30, 40, 50, 75, 100, 150),
    "EUR": (25, 35, 50, 60, 90, 120, 175),
    "USD": (30, 40, 60, 80, 100, 150, 200),
}

CENT = Decimal("0.01")


# --------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------

class Dice:
    """All randomness goes through one seeded numpy generator, in a fixed order."""

    def __init__(self, seed: int):
        self.gen = np.random.default_rng(seed)

    def chance(self, p: float) -> bool:
        return bool(self.gen.random() < p)

    def uniform(self, lo: float, hi: float) -> float:
        return float(self.gen.uniform(lo, hi))

    def normal(self, mean: float, sd: float) -> float:
        return float(self.gen.normal(mean, sd))

    def integer(self, lo: int, hi: int) -> int:
        """Uniform integer in [lo, hi] (both inclusive)."""
        return int(self.gen.integers(lo, hi + 1))

    def pick(self, seq):
        return seq[self.integer(0, len(seq) - 1)]

    def date(self, first: dt.date, last: dt.date) -> dt.date:
        return first + dt.timedelta(days=self.integer(0, (last - first).days))

    def choose_many(self, n: int, k: int, p=None) -> list[int]:
        """k distinct indices out of range(n)."""
        return [int(i) for i in self.gen.choice(n, size=k, replace=False, p=p)]


class WeightedWords:
    """A word list parsed from "Word*weight, Word, ..." text, drawn by weight."""

    def __init__(self, *texts: str):
        self.words: list[str] = []
        weights: list[float] = []
        for text in texts:
            for token in text.replace("\n", " ").split(","):
                word, _, weight = token.strip().partition("*")
                if word:
                    self.words.append(unicodedata.normalize("NFC", word.strip()))
                    weights.append(float(weight) if weight else 1.0)
        cumulative = np.cumsum(weights)
        self.cumulative = cumulative / cumulative[-1]

    def draw(self, dice: Dice) -> str:
        index = int(np.searchsorted(self.cumulative, dice.gen.random(), side="right"))
        return self.words[min(index, len(self.words) - 1)]


def word_list(text: str) -> list[str]:
    return [w.strip() for w in text.replace("\n", " ").split(",") if w.strip()]


_NON_DECOMPOSING = str.maketrans({"ø": "o", "Ø": "O", "ł": "l", "Ł": "L", "æ": "ae",
                                  "Æ": "Ae", "ß": "ss", "đ": "d", "Đ": "D"})


def strip_accents(text: str) -> str:
    text = unicodedata.normalize("NFKD", text.translate(_NON_DECOMPOSING))
    return "".join(c for c in text if not unicodedata.combining(c))


def has_accents(text: str) -> bool:
    return strip_accents(text) != text


def ascii_slug(text: str) -> str:
    """Lower-case ASCII letters only, for building e-mail local parts."""
    return re.sub(r"[^a-z]", "", strip_accents(text).lower())


def add_years(day: dt.date, years: int) -> dt.date:
    try:
        return day.replace(year=day.year + years)
    except ValueError:  # 29 February
        return day.replace(year=day.year + years, day=28)


def money(value: Decimal) -> str:
    return str(value.quantize(CENT, ROUND_HALF_UP))


def decimal_comma(value: Decimal) -> str:
    """An amount as continental exports write it: '2.109,19' (dot between thousands, comma decimals)."""
    return f"{value:,.2f}".translate(str.maketrans(",.", ".,"))


# --------------------------------------------------------------------------
# Phone numbers (fiction ranges only), kept as UK national significant numbers
# --------------------------------------------------------------------------

MOBILE_POOL = [f"7700900{i:03d}" for i in range(1000)]
LANDLINE_POOL = [f"{prefix}{i:04d}" for prefix in ("207946", "113496", "121496", "161496")
                 for i in range(1000)]


def phone_groups(nsn: str) -> list[str]:
    if nsn.startswith("7"):
        return [nsn[:4], nsn[4:]]
    if nsn.startswith("20"):
        return [nsn[:2], nsn[2:6], nsn[6:]]
    return [nsn[:3], nsn[3:6], nsn[6:]]


def phone_e164(nsn: str) -> str:
    return "+44" + nsn


def phone_format(nsn: str, style: str) -> str:
    groups = phone_groups(nsn)
    return {
        "local": "0" + " ".join(groups),
        "local_compact": "0" + nsn,
        "intl": "+44 " + " ".join(groups),
        "intl_compact": "+44" + nsn,
        "intl_00": "0044 " + " ".join(groups),
        "parens": f"(0{groups[0]}) " + " ".join(groups[1:]),
        "intl_trunk": "+44 (0)" + " ".join(groups),
        "dashes": "0" + "-".join(groups),
        "dots": "0" + ".".join(groups),
        "no_trunk": " ".join(groups),
    }[style]


def phone_style(source: str, dice: Dice) -> str:
    styles = PHONE_STYLES[source]
    return list(styles)[_weighted_index(list(styles.values()), dice.gen.random())]


# --------------------------------------------------------------------------
# The true world: exchange rates, streets, households, people
# --------------------------------------------------------------------------

class Rates:
    """Invented EUR->GBP and USD->GBP rates, one per business day."""

    def __init__(self, dice: Dice):
        self.rows: list[tuple[dt.date, str, Decimal]] = []
        self.by_key: dict[tuple[dt.date, str], Decimal] = {}
        level = {"EUR": 0.85, "USD": 0.78}
        day = RATES_FIRST
        while day <= RATES_LAST:
            if day.weekday() < 5:
                for currency, centre in (("EUR", 0.85), ("USD", 0.78)):
                    level[currency] = (centre + 0.99 * (level[currency] - centre)
                                       + dice.normal(0.0, 0.0025))
                    rate = Decimal(f"{level[currency]:.4f}")
                    self.rows.append((day, currency, rate))
                    self.by_key[(day, currency)] = rate
            day += dt.timedelta(days=1)

    def rate(self, currency: str, day: dt.date) -> Decimal:
        """The rate in force on `day`: the latest published one on or before it."""
        if currency == "GBP":
            return Decimal(1)
        assert day >= RATES_FIRST, day
        while (day, currency) not in self.by_key:
            day -= dt.timedelta(days=1)
        return self.by_key[(day, currency)]

    def to_gbp(self, amount: Decimal, currency: str, day: dt.date) -> Decimal:
        return (amount * self.rate(currency, day)).quantize(CENT, ROUND_HALF_UP)

    def is_half_cent_tie(self, amount: Decimal, currency: str, day: dt.date) -> bool:
        """True if converting would land exactly on half a penny.

        Amounts are chosen to avoid that, so any sensible rounding rule gives
        the same GBP figure as the ground truth.
        """
        return (amount * self.rate(currency, day) * 100) % 1 == Decimal("0.5")


@dataclass
class Street:
    name: str
    district: str          # e.g. "TC4"
    units: list[str]       # postcodes along the street, by house-number band
    max_number: int

    def postcode_for(self, number: int) -> str:
        return self.units[(number - 1) * len(self.units) // self.max_number]


def build_streets(dice: Dice) -> list[Street]:
    words = word_list(STREET_WORDS)
    names: dict[str, None] = {}
    while len(names) < 160:
        names[f"{dice.pick(words)} {dice.pick(STREET_TYPES)}"] = None
    streets = []
    used_units: dict[str, None] = {}
    for name in names:
        district = f"{dice.pick(POSTCODE_AREAS)}{dice.integer(1, 19)}"
        units = []
        while len(units) < dice.integer(1, 3):
            unit = (f"{district} {dice.integer(1, 9)}"
                    f"{dice.pick(INWARD_LETTERS)}{dice.pick(INWARD_LETTERS)}")
            if unit not in used_units:
                used_units[unit] = None
                units.append(unit)
        streets.append(Street(name, district, units, dice.integer(12, 180)))
    return streets


@dataclass
class Household:
    hid: int
    street: str
    postcode: str
    landline: str | None = None
    move_date: dt.date | None = None   # moved into the current home on this date
    old_street: str | None = None
    old_postcode: str | None = None
    old_landline: str | None = None
    family_email: str | None = None
    size: int = 1
    family_name: str = ""      # family name of the first member

    def address_on(self, day: dt.date) -> tuple[str, str]:
        if self.move_date and day < self.move_date:
            return self.old_street, self.old_postcode
        return self.street, self.postcode

    def landline_on(self, day: dt.date) -> str | None:
        if self.move_date and day < self.move_date:
            return self.old_landline
        return self.landline


@dataclass
class Person:
    entity_id: str
    household: Household
    given: str                 # all given names, e.g. "Anna Marie"
    family: str
    sex: str                   # F / M / X
    birth: dt.date
    height_cm: float = 0.0
    weight_kg: float = 0.0
    email: str | None = None
    old_email: str | None = None
    email_change: dt.date | None = None
    mobile: str | None = None
    old_mobile: str | None = None
    mobile_change: dt.date | None = None
    twin: Person | None = None        # the other twin, for twins
    contact_of: Person | None = None  # a household member whose e-mail and phone this person's
    #                                   records sometimes give (see BORROWS_CONTACT)

    @property
    def twin_label(self) -> str:
        """The same label for both twins (one pair per household at most), else ''."""
        return f"T{self.household.hid:06d}" if self.twin else ""

    @property
    def first_given(self) -> str:
        return self.given.split(" ")[0]

    def email_on(self, day: dt.date) -> str | None:
        if self.email_change and day < self.email_change:
            return self.old_email
        return self.email

    def mobile_on(self, day: dt.date) -> str | None:
        if self.mobile_change and day < self.mobile_change:
            return self.old_mobile
        return self.mobile

    def main_phone_on(self, day: dt.date) -> str | None:
        return self.mobile_on(day) or self.household.landline_on(day)

    @property
    def main_phone(self) -> str | None:
        return self.mobile or self.household.landline


class World:
    """The true people of Tallow Creek and where they live."""

    # Distinct single people who deliberately share a very common full name.
    NAMESAKES = (("James", "Smith", "M", 6), ("Sarah", "Brown", "F", 5),
                  ("David", "Jones", "M", 4), ("Emma", "Taylor", "F", 4))

    def __init__(self, dice: Dice, n_people: int = N_PEOPLE, streets: list[Street] | None = None,
                 phones: tuple[list[str], list[str]] | None = None):
        self.dice = dice
        self.n_people = n_people
        self.phones = phones  # (mobiles, landlines) to hand out; None: the fiction pools
        self.given_f = WeightedWords(GIVEN_FEMALE, GIVEN_ANY)
        self.given_m = WeightedWords(GIVEN_MALE, GIVEN_ANY)
        self.given_x = WeightedWords(GIVEN_FEMALE, GIVEN_MALE, GIVEN_ANY)
        self.family_names = WeightedWords(FAMILY_NAMES)
        self.streets = build_streets(dice) if streets is None else streets
        self.used_addresses: dict[tuple[str, int], None] = {}
        self.used_emails: dict[str, None] = {}
        self.households: list[Household] = []
        self.people: list[Person] = []
        self._build_households()
        self._assign_bodies()
        self._assign_emails()
        self._assign_phones()

    # -- names and addresses ------------------------------------------------

    def draw_sex(self) -> str:
        roll = self.dice.gen.random()
        return "F" if roll < 0.49 else "M" if roll < 0.98 else "X"

    def draw_given(self, sex: str, avoid: tuple[str, ...] = ()) -> str:
        names = {"F": self.given_f, "M": self.given_m, "X": self.given_x}[sex]
        first = names.draw(self.dice)
        while first in avoid:
            first = names.draw(self.dice)
        if self.dice.chance(0.15):
            middle = names.draw(self.dice)
            if middle != first:
                return f"{first} {middle}"
        return first

    def new_address(self) -> tuple[str, str]:
        while True:
            street = self.dice.pick(self.streets)
            number = self.dice.integer(1, street.max_number)
            if (street.name, street.district, number) not in self.used_addresses:
                self.used_addresses[(street.name, street.district, number)] = None
                return f"{number} {street.name}", street.postcode_for(number)

    def draw_birth(self, first_year: int, last_year: int) -> dt.date:
        first = max(dt.date(first_year, 1, 1), BIRTH_FIRST)
        last = min(dt.date(last_year, 12, 31), BIRTH_LAST)
        return self.dice.date(first, last)

    # -- households ---------------------------------------------------------

    def _new_household(self, size: int) -> Household:
        street, postcode = self.new_address()
        household = Household(hid=len(self.households) + 1, street=street,
                              postcode=postcode, size=size)
        if self.dice.chance(0.18):
            household.move_date = self.dice.date(dt.date(2012, 1, 1), dt.date(2026, 8, 31))
            household.old_street, household.old_postcode = self.new_address()
        self.households.append(household)
        return household

    def _add_person(self, household: Household, given: str, family: str, sex: str,
                    birth: dt.date) -> Person:
        person = Person(f"P{len(self.people) + 1:0{max(5, len(str(self.n_people)))}d}", household, given, family, sex, birth)
        household.family_name = household.family_name or family
        self.people.append(person)
        return person

    def _build_households(self) -> None:
        planted = [(g, f, s) for g, f, s, n in self.NAMESAKES for _ in range(n)]
        sizes, size_weights = (2, 3, 4, 5), (0.50, 0.25, 0.17, 0.08)
        while len(self.people) < self.n_people:
            remaining = self.n_people - len(self.people)
            if self.dice.chance(0.87):
                size = 1
            else:
                size = min(sizes[int(self.dice.gen.choice(4, p=size_weights))], remaining)
            household = self._new_household(size)
            if size == 1:
                self._add_single(household, planted.pop() if planted else None)
            else:
                self._add_family(household, size)

    def _add_single(self, household: Household, planted) -> None:
        if planted:
            given, family, sex = planted
        else:
            sex = self.draw_sex()
            given, family = self.draw_given(sex), self.family_names.draw(self.dice)
        self._add_person(household, given, family, sex, self.draw_birth(1940, 2010))

    def _add_family(self, household: Household, size: int) -> None:
        dice = self.dice
        family = self.family_names.draw(dice)
        head_sex = "F" if dice.chance(0.5) else "M"
        if dice.chance(0.02):
            head_sex = "X"
        with_partner = dice.chance(0.85 if size == 2 else 0.80)
        n_children = size - (2 if with_partner else 1)
        head_birth = (self.draw_birth(1948, 1986) if n_children
                      else self.draw_birth(1940, 2000))
        head = self._add_person(household, self.draw_given(head_sex), family, head_sex,
                                head_birth)
        taken = [head.first_given]
        partner = None
        if with_partner:
            if head_sex == "X":
                partner_sex = self.draw_sex()
            elif dice.chance(0.05):
                partner_sex = head_sex
            else:
                partner_sex = "M" if head_sex == "F" else "F"
            partner_family = family if dice.chance(0.80) else self.family_names.draw(dice)
            shift = round(dice.normal(0, 1100))  # days, about +-3 years
            partner_birth = min(max(head_birth + dt.timedelta(days=shift), BIRTH_FIRST),
                                BIRTH_LAST)
            partner = self._add_person(household, self.draw_given(partner_sex, tuple(taken)),
                                       partner_family, partner_sex, partner_birth)
            taken.append(partner.first_given)
            if dice.chance(BORROWS_CONTACT["partner"]):
                partner.contact_of = head
        child_family = family
        if partner and partner.family != family and dice.chance(0.25):
            child_family = f"{family}-{partner.family}"  # double-barrelled
        # the child after `twin_of` (if any) is a twin of that child
        twin_of = (dice.integer(0, n_children - 2) if n_children >= 2 and dice.chance(TWIN_FAMILY)
                   else None)
        parents = [head] + ([partner] if partner else [])
        previous = None
        for i in range(n_children):
            sex = self.draw_sex()
            is_twin = twin_of is not None and i == twin_of + 1
            if is_twin:
                birth = previous.birth
                given = self.draw_given(sex, tuple(taken))
                if dice.chance(TWIN_SAME_FIRST_NAME):
                    # told apart by their second given names only
                    names = {"F": self.given_f, "M": self.given_m, "X": self.given_x}[sex]
                    middles = [names.draw(dice) for _ in range(2)]
                    if middles[0] != middles[1] and previous.first_given not in middles:
                        previous.given = f"{previous.first_given} {middles[0]}"
                        given = f"{previous.first_given} {middles[1]}"
            else:
                birth = self.draw_birth(head_birth.year + 22, head_birth.year + 40)
                given = self.draw_given(sex, tuple(taken))
            child = self._add_person(household, given, child_family, sex, birth)
            taken.append(child.first_given)
            if is_twin:
                child.twin, previous.twin = previous, child
            if is_twin and dice.chance(BORROWS_CONTACT["twin"]):
                child.contact_of = previous
            elif dice.chance(BORROWS_CONTACT["child"]):
                child.contact_of = dice.pick(parents)
            previous = child

    # -- bodies, e-mails, phones ---------------------------------------------

    def _assign_bodies(self) -> None:
        height_by_sex = {"F": (163.5, 6.5), "M": (177.0, 7.0), "X": (170.0, 8.0)}
        for person in self.people:
            mean, sd = height_by_sex[person.sex]
            height = min(max(self.dice.normal(mean, sd), 145.0), 205.0)
            bmi = min(max(self.dice.normal(25.5, 4.0), 17.5), 42.0)
            person.height_cm = round(height, 1)
            person.weight_kg = round(bmi * (person.height_cm / 100) ** 2, 1)

    def _unique_email(self, local: str) -> str:
        domain = self.dice.pick(EMAIL_DOMAINS)
        address = f"{local}@{domain}"
        while address in self.used_emails:
            address = f"{local}{self.dice.integer(1, 99)}@{domain}"
        self.used_emails[address] = None
        return address

    def _personal_local_part(self, person: Person) -> str:
        g, f = ascii_slug(person.first_given), ascii_slug(person.family)
        yy = f"{person.birth.year % 100:02d}"
        patterns = (f"{g}.{f}", f"{g}{f}", f"{g[0]}{f}", f"{g}.{f}{yy}", f"{f}.{g}",
                    f"{g}_{f}", f"{g[0]}.{f}{self.dice.integer(1, 9)}", f"{f}{g[0]}")
        return self.dice.pick(patterns)

    def _assign_emails(self) -> None:
        for household in self.households:
            if household.size >= 2 and self.dice.chance(0.25):
                family = ascii_slug(household.family_name)
                household.family_email = self._unique_email(
                    self.dice.pick((f"the{family}s", f"{family}family", f"{family}.home")))
        for person in self.people:
            household = person.household
            if household.family_email and self.dice.chance(0.6):
                person.email = household.family_email
            elif self.dice.chance(0.88):
                person.email = self._unique_email(self._personal_local_part(person))
                if self.dice.chance(0.07):
                    person.old_email = self._unique_email(self._personal_local_part(person))
                    person.email_change = self.dice.date(dt.date(2012, 1, 1),
                                                         dt.date(2026, 8, 31))

    def _assign_phones(self) -> None:
        """Share the 5,000 fictional numbers: few mobiles, household landlines.

        880 people get a mobile (about 100 more numbers serve as their older
        mobiles); about 3,500 of the 4,000 landlines go to households, current
        and previous homes.
        """
        if self.phones is not None:
            mobiles, landlines = self.phones
        else:
            mobiles = [MOBILE_POOL[i] for i in self.dice.choose_many(1000, 1000)]
            landlines = [LANDLINE_POOL[i] for i in self.dice.choose_many(4000, 4000)]
        owners = sorted(self.dice.choose_many(len(self.people), len(self.people) * 880 // N_PEOPLE))
        for index in owners:
            person = self.people[index]
            person.mobile = mobiles.pop()
        for index in owners:
            person = self.people[index]
            if mobiles and self.dice.chance(0.12):
                person.old_mobile = mobiles.pop()
                person.mobile_change = self.dice.date(dt.date(2014, 1, 1),
                                                      dt.date(2026, 8, 31))
        for household in self.households:
            if self.dice.chance(0.75):
                household.landline = landlines.pop()
                if household.move_date and self.dice.chance(0.8):
                    household.old_landline = landlines.pop()


# --------------------------------------------------------------------------
# Damaging and rendering records
# --------------------------------------------------------------------------

@dataclass
class Record:
    source: str
    person: Person
    day: dt.date                     # joined / last order / rented on / event date
    row: dict = field(default_factory=dict)
    faults: list[str] = field(default_factory=list)
    record_id: str = ""
    event: tuple | None = None       # (name, date, fee) for events
    amount: Decimal | None = None    # web spend (EUR) or deposit amount
    currency: str | None = None


def typo(word: str, dice: Dice) -> str:
    """One keyboard slip: insert, delete, substitute or transpose a letter."""
    positions = [i for i, c in enumerate(word) if c.isalpha()]
    if len(positions) < 3:
        return word
    inner = positions[1:]
    i = dice.pick(inner) if dice.chance(0.9) else positions[0]
    letter = chr(ord("a") + dice.integer(0, 25))
    if word[i].isupper():
        letter = letter.upper()
    operation = dice.pick(("insert", "delete", "substitute", "transpose"))
    if operation == "insert":
        return word[:i] + letter + word[i:]
    if operation == "delete":
        return word[:i] + word[i + 1:]
    if operation == "substitute":
        if letter.lower() == word[i].lower():
            letter = "e" if word[i].lower() != "e" else "a"
        return word[:i] + letter + word[i + 1:]
    j = i + 1 if i + 1 < len(word) and word[i + 1].isalpha() else i - 1
    a, b = sorted((i, j))
    if word[a].lower() == word[b].lower():
        return word[:i] + word[i + 1:]  # nothing to swap: drop a letter instead
    return word[:a] + word[b] + word[a] + word[b + 1:]


def punctuation_variant(family: str, dice: Dice) -> str | None:
    """Another way of writing hyphens, apostrophes or multi-part family names."""
    if "-" in family:
        return family.replace("-", dice.pick((" ", "")))
    if "'" in family:
        return family.replace("'", dice.pick(("", " ")))
    if " " in family:
        parts = family.split(" ")
        return dice.pick(("".join(parts),
                          " ".join(p.capitalize() for p in parts),
                          " ".join([parts[0].lower()] + parts[1:]) if parts[0][0].isupper()
                          else " ".join([parts[0].capitalize()] + parts[1:])))
    return None


def messy_name(person: Person, rates: dict, dice: Dice, faults: list[str]) -> tuple[str, str]:
    """Given and family name as a clerk or customer typed them."""
    given, family = person.given, person.family
    if " " in given and dice.chance(rates["first_given_only"]):
        given = person.first_given
    first, _, rest = given.partition(" ")
    if first in NICKNAMES and dice.chance(rates["nickname"]):
        first = dice.pick(NICKNAMES[first])
        given = f"{first} {rest}".strip()
        faults.append("nickname")
    if has_accents(given + family) and dice.chance(rates["drop_accents"]):
        given, family = strip_accents(given), strip_accents(family)
        faults.append("accents_dropped")
    if dice.chance(rates["punctuation"]):
        variant = punctuation_variant(family, dice)
        if variant and variant != family:
            family = variant
            faults.append("family_punctuation")
    if dice.chance(rates["typo_given"]):
        given = typo(given, dice)
        faults.append("typo_given")
    if dice.chance(rates["typo_family"]):
        family = typo(family, dice)
        faults.append("typo_family")
    if dice.chance(rates["case"]):
        style = dice.pick(("upper_family", "upper", "lower"))
        if style == "upper_family":
            family = family.upper()
        elif style == "upper":
            given, family = given.upper(), family.upper()
        else:
            given, family = given.lower(), family.lower()
        faults.append(f"case_{style}")
    if dice.chance(rates["swap_names"]):
        given, family = family, given
        faults.append("swapped_names")
    return given, family


def extra_spaces(text: str, dice: Dice) -> str:
    style = dice.pick(("trailing", "leading", "double"))
    if style == "double" and " " in text:
        return text.replace(" ", "  ", 1)
    if style == "leading":
        return " " + text
    return text + " "


def messy_birth(person: Person, rates: dict, dice: Dice, faults: list[str]) -> dt.date | None:
    if dice.chance(rates["missing_birth"]):
        return None
    birth = person.birth
    if (rates.get("dm_swap") and birth.day <= 12 and birth.day != birth.month
            and dice.chance(rates["dm_swap"])):
        faults.append("day_month_swapped")
        return birth.replace(day=birth.month, month=birth.day)
    return birth


def messy_email(person: Person, day: dt.date, rates: dict, dice: Dice,
                faults: list[str]) -> str | None:
    email = person.email_on(day)
    if email and email != person.email:
        faults.append("old_email")
    if email is None or dice.chance(rates["missing_email"]):
        return None
    if dice.chance(rates["email_case"]):
        local, _, domain = email.partition("@")
        email = ".".join(part.capitalize() for part in local.split(".")) + "@" + domain
        faults.append("email_case")
    return email


def contact_person(person: Person, dice: Dice, faults: list[str]) -> Person:
    """Whose e-mail address and phone a record gives: the person's own, or for some household
    members now and then another member's (a parent's, a partner's, a twin's)."""
    other = person.contact_of
    if other is None:
        return person
    own = person.email or person.mobile
    if dice.chance(BORROWED_PER_RECORD if own else BORROWED_PER_RECORD_NONE):
        faults.append("contact_of_relative")
        return other
    return person


def note_history(person: Person, day: dt.date, faults: list[str]) -> None:
    if person.household.move_date and day < person.household.move_date:
        faults.append("old_address")
    if person.mobile_change and day < person.mobile_change:
        faults.append("old_mobile")


def render_membership(rec: Record, dice: Dice) -> None:
    rates, person, faults = FAULTS["membership"], rec.person, rec.faults
    note_history(person, rec.day, faults)
    given, family = messy_name(person, rates, dice, faults)
    name = f"{family}, {given}"
    if dice.chance(rates["spaces"]):
        name = dice.pick((f"{family},{given}", f"{family} ,{given}", f"{family},  {given}",
                          f"{family}, {given} ", f" {family}, {given}"))
        faults.append("extra_spaces")
    birth = messy_birth(person, rates, dice, faults)

    contact = contact_person(person, dice, faults)
    phone = contact.main_phone_on(rec.day)
    landline = person.household.landline_on(rec.day)
    if landline and phone != landline and dice.chance(rates["landline_instead"]):
        phone = landline
    if phone and dice.chance(rates["missing_phone"]):
        phone = None

    street, postcode = person.household.address_on(rec.day)
    if dice.chance(rates["missing_address"]):
        street, postcode = None, None
        faults.append("missing_address")
    if street and dice.chance(rates["street_style"]):
        number, _, rest = street.partition(" ")
        kind = rest.rsplit(" ", 1)[-1]
        if kind in STREET_ABBREVIATIONS and dice.chance(0.7):
            street = f"{number} {rest[: -len(kind)]}{STREET_ABBREVIATIONS[kind]}"
        else:
            street = f"{number}, {rest}"
        faults.append("street_style")
    if postcode and dice.chance(rates["postcode_style"]):
        postcode = postcode.lower()
        faults.append("postcode_lower")

    height = None if dice.chance(rates["missing_height"]) else person.height_cm

    age_at_join = (rec.day - person.birth).days / 365.25
    period = "before_2015" if rec.day.year < 2015 else "from_2015"
    if age_at_join >= 65 or age_at_join < 22:
        band = "concession"
    else:
        band = "plus" if dice.chance(0.15) else "standard"
    rec.amount = Decimal(MEMBERSHIP_FEES[period][band])
    rec.currency = "GBP"

    locker = None
    if dice.chance(0.2):
        locker = dice.pick((f"L-{dice.integer(1, 60)}", f"L{dice.integer(1, 60)}",
                            f"B-{dice.integer(1, 30):02d}", f"L-{dice.integer(1, 60)} (shared)"))
    rec.row = {
        "Name": name,
        "Born": birth.strftime("%d/%m/%Y") if birth else None,
        "Joined": dt.datetime.combine(rec.day, dt.time()),
        "Phone": phone_format(phone, phone_style("membership", dice)) if phone else None,
        # the office keeps the address in one cell: "street, postcode"
        "Address": ", ".join(part for part in (street, postcode) if part) or None,
        "Height (cm)": height,
        "Annual Fee": float(rec.amount),
        "Locker": locker,
    }


def render_webshop(rec: Record, dice: Dice, rates_table: Rates) -> None:
    rates, person, faults = FAULTS["webshop"], rec.person, rec.faults
    note_history(person, rec.day, faults)
    given, family = messy_name(person, rates, dice, faults)
    if dice.chance(rates["spaces"]):
        if dice.chance(0.5):
            given = extra_spaces(given, dice)
        else:
            family = extra_spaces(family, dice)
        faults.append("extra_spaces")
    birth = messy_birth(person, rates, dice, faults)
    contact = contact_person(person, dice, faults)
    email = messy_email(contact, rec.day, rates, dice, faults)

    phone = contact.mobile_on(rec.day)
    if phone is None and dice.chance(rates["landline_in_mobile"]):
        phone = person.household.landline_on(rec.day)
    if phone and dice.chance(rates["missing_phone"]):
        phone = None

    _, postcode = person.household.address_on(rec.day)
    if dice.chance(rates["missing_postcode"]):
        postcode = None
    elif dice.chance(rates["postcode_style"]):
        style = dice.pick(("lower", "nospace", "lower_nospace"))
        postcode = postcode.lower() if "lower" in style else postcode
        postcode = postcode.replace(" ", "") if "nospace" in style else postcode
        faults.append(f"postcode_{style}")

    spend = Decimal(f"{max(5.0, float(np.exp(dice.normal(4.6, 1.0)))):.2f}")
    while rates_table.is_half_cent_tie(spend, "EUR", rec.day):
        spend += CENT
    rec.amount, rec.currency = spend, "EUR"
    rec.row = {
        "first_name": given,
        "last_name": family,
        "email": email or "",
        "mobile": phone_format(phone, phone_style("webshop", dice)) if phone else "",
        "date_of_birth": birth.isoformat() if birth else "",
        "lifetime_spend": decimal_comma(spend),  # the shop's platform writes decimal commas
        "last_order": rec.day.isoformat(),
        "ship_postcode": postcode or "",
        "marketing_opt_in": "Y" if dice.chance(0.4) else "N",
    }


def render_rentals(rec: Record, dice: Dice, rates_table: Rates) -> None:
    rates, person, faults = FAULTS["rentals"], rec.person, rec.faults
    note_history(person, rec.day, faults)
    given, family = messy_name(person, rates, dice, faults)
    if dice.chance(rates["spaces"]):
        given = extra_spaces(given, dice)
        faults.append("extra_spaces")
    birth = messy_birth(person, rates, dice, faults)

    title = None
    if not dice.chance(rates["missing_title"]):
        title = "Dr" if dice.chance(0.06) else {"F": "Ms", "M": "Mr", "X": None}[person.sex]

    phone = contact_person(person, dice, faults).main_phone_on(rec.day)
    if phone and dice.chance(rates["missing_phone"]):
        phone = None
    style = phone_style("rentals", dice)

    height = None if dice.chance(rates["missing_height"]) else round(person.height_cm / 2.54, 1)
    weight = (None if dice.chance(rates["missing_weight"])
              else round(person.weight_kg / 0.45359237, 1))

    roll = dice.gen.random()
    currency = "GBP" if roll < 0.65 else "EUR" if roll < 0.90 else "USD"
    amount = Decimal(dice.pick(DEPOSIT_AMOUNTS[currency]))
    for _ in range(10):
        if not rates_table.is_half_cent_tie(amount, currency, rec.day):
            break
        amount = Decimal(dice.pick(DEPOSIT_AMOUNTS[currency]))
    while rates_table.is_half_cent_tie(amount, currency, rec.day):
        amount += 1
    rec.amount, rec.currency = amount, currency
    rec.row = {
        "name": {"title": title, "first": given, "last": family},
        "contact": {"phone": phone_format(phone, style) if phone else None},
        "dob": birth.strftime("%m/%d/%Y") if birth else None,
        "height_in": height,
        "weight_lb": weight,
        # the desk's booking form before 2025 left the currency blank for pounds
        "deposit": {"amount": float(amount),
                    "currency": None if currency == "GBP" and rec.day.year < 2025 else currency},
        "rented_on": rec.day.isoformat(),
    }


def render_events(rec: Record, dice: Dice) -> None:
    rates, person, faults = FAULTS["events"], rec.person, rec.faults
    given, family = messy_name(person, rates, dice, faults)
    if dice.chance(rates["spaces"]):
        family = extra_spaces(family, dice)
        faults.append("extra_spaces")
    birth = messy_birth(person, rates, dice, faults)
    email = messy_email(contact_person(person, dice, faults), rec.day, rates, dice, faults)
    name, day, fee = rec.event
    if fee > 0 and dice.chance(0.08):
        fee = Decimal("0.00")  # volunteers take part for free
    rec.amount, rec.currency = fee, "GBP"
    rec.row = {
        "given": given,
        "surname": family,
        "email": email,
        "birth_year": birth.year if birth else None,
        "fee": float(fee),
        "event_name": name,
        "event_date": day.isoformat(),
    }


def thin_out(rec: Record, dice: Dice) -> None:
    """Sometimes (SPARSE) leave a record with two or three person fields: the family name and
    one or two others; the rest, body measures and titles included, blank."""
    if not dice.chance(SPARSE[rec.source]):
        return
    row = rec.row
    if rec.source == "membership":  # the name cell stays whole; at most one of phone and address
        keep = dice.pick(("Phone", "Address", None))
        for column in ("Born", "Phone", "Address", "Height (cm)"):
            if column != keep:
                row[column] = None
    elif rec.source == "webshop":
        others = [c for c in ("first_name", "email", "mobile", "ship_postcode") if row[c]]
        kept = set(dice.choose_many(len(others), min(len(others), dice.integer(1, 2)))) if others else set()
        for index, column in enumerate(others):
            if index not in kept:
                row[column] = ""
        row["date_of_birth"] = ""
    elif rec.source == "rentals":
        places = {"first": row["name"], "phone": row["contact"], "dob": row}  # nested JSON
        others = [c for c, place in places.items() if place[c]]
        kept = set(dice.choose_many(len(others), min(len(others), dice.integer(1, 2)))) if others else set()
        for index, column in enumerate(others):
            if index not in kept:
                places[column][column] = None
        row["name"]["title"] = None
        row["height_in"] = row["weight_lb"] = None
    else:
        others = [c for c in ("given", "email", "birth_year") if row[c]]
        kept = set(dice.choose_many(len(others), min(len(others), dice.integer(1, 2)))) if others else set()
        for index, column in enumerate(others):
            if index not in kept:
                row[column] = None
    rec.faults.append("sparse")


# --------------------------------------------------------------------------
# Who appears where
# --------------------------------------------------------------------------

def build_event_programme(dice: Dice) -> list[tuple[str, dt.date, Decimal]]:
    programme = []
    year, month = ACTIVITY_FIRST.year, ACTIVITY_FIRST.month
    while dt.date(year, month, 1) <= ACTIVITY_LAST:
        first = dt.date(year, month, 1)
        weekend_days = [first + dt.timedelta(days=d) for d in range(28)
                        if (first + dt.timedelta(days=d)).weekday() >= 5]
        for index in sorted(dice.choose_many(len(EVENT_TYPES), 3)):
            name, fee = EVENT_TYPES[index]
            fee = Decimal(fee)
            if year == 2026 and fee > 0:
                fee += 2  # the 2026 programme costs a little more
            programme.append((name, dice.pick(weekend_days), fee))
        month += 1
        if month == 13:
            year, month = year + 1, 1
    return sorted(programme, key=lambda e: (e[1], e[0]))


def plan_records(world: World, dice: Dice,
                 programme: list[tuple[str, dt.date, Decimal]]) -> list[Record]:
    weights = np.array([SOURCE_WEIGHT[s] for s in SOURCES])
    weights = weights / weights.sum()
    records: list[Record] = []
    for person in world.people:
        k = 1 + int(dice.gen.choice(4, p=N_SOURCES_PROB))
        chosen = sorted(dice.choose_many(4, k, p=weights))
        for source in (SOURCES[i] for i in chosen):
            copies = 1
            if dice.chance(WITHIN_SOURCE_DUP[source]):
                copies += 2 if dice.chance(0.1) else 1
            used_days: list[dt.date] = []
            for copy in range(copies):
                rec = Record(source, person, ACTIVITY_FIRST)
                if source == "events":
                    if copy and dice.chance(0.5):
                        rec.event = records[-1].event  # signed up twice for one event
                        rec.faults.append("double_signup")
                    else:
                        rec.event = dice.pick(programme)
                    rec.day = rec.event[1]
                else:
                    first = ACTIVITY_FIRST
                    if source == "membership":
                        first = max(JOIN_FIRST, add_years(person.birth, 14))
                    rec.day = dice.date(first, ACTIVITY_LAST)
                    while rec.day in used_days:
                        rec.day = dice.date(first, ACTIVITY_LAST)
                used_days.append(rec.day)
                if copy:
                    rec.faults.append("within_source_duplicate")
                records.append(rec)
    return records


def assign_ids(records: list[Record], dice: Dice) -> None:
    """Give every record its department's ID; IDs follow each desk's own habits."""
    by_source: dict[str, list[Record]] = defaultdict(list)
    for rec in records:
        by_source[rec.source].append(rec)
    for source, recs in by_source.items():
        shuffled = [recs[i] for i in dice.choose_many(len(recs), len(recs))]
        if source == "webshop":
            ordered = shuffled  # account numbers say nothing about dates
        else:
            ordered = sorted(shuffled, key=lambda r: r.day)  # stable: ties stay shuffled
        number = 0
        for rec in ordered:
            if source == "membership":
                number += dice.integer(1, 3)
                rec.record_id = f"M-{number:06d}"
            elif source == "webshop":
                number += dice.integer(1, 40)
                rec.record_id = f"W{100000 + number}"
            elif source == "rentals":
                number += dice.integer(1, 2)
                rec.record_id = f"R-{number:05d}"
            else:
                number += 1 if dice.chance(0.95) else dice.integer(2, 4)
                rec.record_id = str(number)


def plant_unit_slips(records: list[Record], dice: Dice) -> None:
    members = [r for r in records if r.source == "membership" and r.row["Height (cm)"]]
    for index in sorted(dice.choose_many(len(members), MEMBERSHIP_INCH_SLIPS)):
        rec = members[index]
        rec.row["Height (cm)"] = round(rec.person.height_cm / 2.54, 1)
        rec.faults.append("height_in_inches")
    renters = [r for r in records if r.source == "rentals" and r.row["height_in"]]
    for index in sorted(dice.choose_many(len(renters), RENTALS_CM_SLIPS)):
        rec = renters[index]
        rec.row["height_in"] = rec.person.height_cm
        rec.faults.append("height_in_centimetres")


# --------------------------------------------------------------------------
# Writers
# --------------------------------------------------------------------------

MEMBERSHIP_COLUMNS = ("Member No", "Name", "Born", "Joined", "Phone", "Address",
                      "Height (cm)", "Annual Fee", "Locker")
MEMBERSHIP_WIDTHS = (11, 32, 12, 12, 15, 34, 11, 11, 16)
WEBSHOP_DELIMITER = ";"  # the shop's platform writes semicolon-separated files with decimal commas
WEBSHOP_COLUMNS = ("customer_id", "first_name", "last_name", "email", "mobile",
                   "date_of_birth", "lifetime_spend", "last_order", "ship_postcode",
                   "marketing_opt_in")


def write_membership(path: Path, records: list[Record]) -> None:
    workbook = openpyxl.Workbook()
    sheet = workbook.active
    sheet.title = "Members"
    sheet.append(MEMBERSHIP_COLUMNS)
    for cell in sheet[1]:
        cell.font = Font(bold=True)
    for rec in records:
        sheet.append([rec.record_id] + [rec.row[c] for c in MEMBERSHIP_COLUMNS[1:]])
    for row in sheet.iter_rows(min_row=2):
        row[2].number_format = "@"            # Born stays text
        row[3].number_format = "dd/mm/yyyy"   # Joined is a real date
        row[6].number_format = "0.0"
        row[7].number_format = "0.00"
    for letter, width in zip("ABCDEFGHI", MEMBERSHIP_WIDTHS, strict=True):
        sheet.column_dimensions[letter].width = width
    sheet.freeze_panes = "A2"
    workbook.properties.creator = "Tallow Creek membership office (invented demo)"
    workbook.properties.title = "Members"
    workbook.properties.created = FIXED_FILE_TIME
    workbook.properties.modified = FIXED_FILE_TIME
    buffer = io.BytesIO()
    workbook.save(buffer)
    write_reproducible_zip(path, buffer.getvalue())


def write_reproducible_zip(path: Path, data: bytes, members: dict[str, bytes] | None = None,
                           sheet: tuple[str, Path, str] | None = None) -> None:
    """Rewrite a zip with fixed member timestamps and fixed document dates.

    ``members`` (name -> content) replaces ``data``; ``sheet`` = (head, rows file, tail) streams
    the first worksheet from a file instead (big workspaces).
    """
    stamp = FIXED_FILE_TIME.strftime("%Y-%m-%dT%H:%M:%SZ")
    if members is None:
        with zipfile.ZipFile(io.BytesIO(data)) as source:
            members = {info.filename: source.read(info.filename) for info in source.infolist()}
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as target:
        for name, content in members.items():
            fixed = zipfile.ZipInfo(name, date_time=FIXED_FILE_TIME.timetuple()[:6])
            fixed.compress_type = zipfile.ZIP_DEFLATED
            fixed.external_attr = 0o644 << 16
            if sheet is not None and name == "xl/worksheets/sheet1.xml":
                head, rows, tail = sheet
                with target.open(fixed, "w", force_zip64=True) as out, open(rows, "rb") as staged:
                    out.write(head.encode())
                    while block := staged.read(1 << 20):
                        out.write(block)
                    out.write(tail.encode())
                continue
            if name == "docProps/core.xml":
                content = re.sub(rb"(<dcterms:(created|modified)[^>]*>)[^<]*(</dcterms:)",
                                 rb"\g<1>" + stamp.encode() + rb"\g<3>", content)
            target.writestr(fixed, content)


def write_csv(path: Path, header, rows, comment: str | None = None, delimiter: str = ",") -> None:
    with open(path, "w", encoding="utf-8", newline="") as handle:
        if comment:
            handle.write(comment + "\n")
        writer = csv.writer(handle, lineterminator="\n", delimiter=delimiter)
        writer.writerow(header)
        writer.writerows(rows)


def write_webshop(path: Path, records: list[Record]) -> None:
    write_csv(path, WEBSHOP_COLUMNS,
              ([rec.record_id] + [rec.row[c] for c in WEBSHOP_COLUMNS[1:]] for rec in records),
              delimiter=WEBSHOP_DELIMITER)


def write_rentals(path: Path, records: list[Record]) -> None:
    with open(path, "w", encoding="utf-8", newline="\n") as handle:
        handle.writelines(json.dumps({"rental_ref": rec.record_id, **rec.row},
                                    ensure_ascii=False) + "\n" for rec in records)


def write_events(path: Path, records: list[Record]) -> None:
    if path.exists():
        path.unlink()
    connection = sqlite3.connect(path)
    try:
        connection.execute(
            "CREATE TABLE signups (signup_id INTEGER PRIMARY KEY, given TEXT, surname TEXT, "
            "email TEXT, birth_year INTEGER, fee REAL, event_name TEXT, event_date TEXT)")
        connection.executemany(
            "INSERT INTO signups VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            [(int(rec.record_id), rec.row["given"], rec.row["surname"], rec.row["email"],
              rec.row["birth_year"], rec.row["fee"], rec.row["event_name"],
              rec.row["event_date"]) for rec in records])
        connection.commit()
    finally:
        connection.close()


def write_rates(path: Path, rates: Rates) -> None:
    write_csv(path, ("date", "from", "to", "rate"),
              ((day.isoformat(), currency, "GBP", str(rate)) for day, currency, rate in rates.rows),
              comment="# INVENTED exchange rates for the Tallow Creek demo only; "
                      "not real market data")


def entity_rows(world: World, records: list[Record], rates: Rates):
    by_person: dict[str, list[Record]] = defaultdict(list)
    for rec in records:
        by_person[rec.person.entity_id].append(rec)
    for person in world.people:
        recs = by_person[person.entity_id]
        members = [r for r in recs if r.source == "membership"]
        orders = [r for r in recs if r.source == "webshop"]
        rentals = [r for r in recs if r.source == "rentals"]
        signups = [r for r in recs if r.source == "events"]
        fee = money(max(members, key=lambda r: r.day).amount) if members else ""
        spend = ""
        if orders:
            latest = max(orders, key=lambda r: r.day)
            spend = money(rates.to_gbp(latest.amount, "EUR", latest.day))
        # each deposit converted exactly, the total rounded once (half up) to the penny
        deposits = money(sum(r.amount * rates.rate(r.currency, r.day) for r in rentals)) if rentals else ""
        event_fees = money(sum(r.amount for r in signups)) if signups else ""
        phone = person.main_phone
        yield (person.entity_id, person.given, person.family, person.sex,
               person.birth.isoformat(), person.email or "",
               phone_e164(phone) if phone else "", person.household.street,
               person.household.postcode, f"{person.height_cm:.1f}",
               f"{person.weight_kg:.1f}", fee, spend, deposits, event_fees,
               f"H{person.household.hid:06d}", person.twin.entity_id if person.twin else "")


ENTITY_COLUMNS = ("entity_id", "given_name", "family_name", "sex", "birth_date", "email", "phone",
                  "street", "postcode", "height_cm", "weight_kg", "annual_fee_gbp",
                  "lifetime_spend_gbp", "deposits_gbp", "event_fees_gbp", "household_id", "twin_of")
# The truth crosswalk's columns: ``twins`` is one label shared by the records of a pair of twins
# (blank for everyone else), so that evaluation can count twins' pairs as a kind of their own.
CROSSWALK_COLUMNS = ("source", "record_id", "entity_id", "twins")


def crosswalk_rows(records: list[Record]):
    return ((r.source, r.record_id, r.person.entity_id, r.person.twin_label) for r in records)


def write_truth(folder: Path, world: World, records: list[Record], rates: Rates) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    write_csv(folder / "crosswalk.csv", CROSSWALK_COLUMNS, crosswalk_rows(records))
    write_csv(folder / "entities.csv", ENTITY_COLUMNS, entity_rows(world, records, rates))
    write_csv(folder / "record_faults.csv", ("source", "record_id", "faults"),
              ((r.source, r.record_id, ";".join(r.faults)) for r in records))


# --------------------------------------------------------------------------
# Main
# --------------------------------------------------------------------------

def record_sort_key(rec: Record):
    if rec.source == "events":
        return SOURCES.index(rec.source), int(rec.record_id)
    return SOURCES.index(rec.source), rec.record_id


def summarise(world: World, records: list[Record]) -> None:
    per_source = Counter(r.source for r in records)
    print("records per source:", ", ".join(f"{s}={per_source[s]}" for s in SOURCES),
          f"(total {len(records)})")
    entities = {r.person.entity_id for r in records}
    print(f"entities: {len(world.people)} true people, {len(entities)} with records, "
          f"{len(world.households)} households")
    sources_of: dict[str, set] = defaultdict(set)
    pair_count: Counter = Counter()
    for r in records:
        sources_of[r.person.entity_id].add(r.source)
        pair_count[(r.person.entity_id, r.source)] += 1
    spread = Counter(len(s) for s in sources_of.values())
    print("entities by number of sources:", dict(sorted(spread.items())))
    within = Counter()
    for (_entity, source), n in pair_count.items():
        within[source] += n * (n - 1) // 2
    total_per_entity = Counter(r.person.entity_id for r in records)
    all_pairs = sum(n * (n - 1) // 2 for n in total_per_entity.values())
    print("within-source duplicate pairs:", dict(within), f"(total {sum(within.values())})")
    print(f"cross-source duplicate pairs: {all_pairs - sum(within.values())}; "
          f"all true matching pairs: {all_pairs}")
    fault_counts = Counter(f for r in records for f in r.faults)
    print("faults:", dict(sorted(fault_counts.items())))
    twins = sum(1 for p in world.people if p.twin)
    borrowers = Counter("twin" if p.contact_of is p.twin and p.twin else
                        "partner or child" for p in world.people if p.contact_of)
    families = [h for h in world.households if h.size >= 2]
    print(f"people with a twin: {twins} ({twins / len(world.people):.1%}); people whose records "
          f"may give a relative's contact details: {dict(borrowers)}; records that do: "
          f"{fault_counts['contact_of_relative']}; sparse records: {fault_counts['sparse']} "
          f"({fault_counts['sparse'] / len(records):.1%}); households of 2+ that moved together: "
          f"{sum(1 for h in families if h.move_date)} of {len(families)}")


def generate(out: Path) -> None:
    dice = Dice(SEED)
    rates = Rates(dice)
    world = World(dice)
    programme = build_event_programme(dice)
    records = plan_records(world, dice, programme)
    for rec in records:
        if rec.source == "membership":
            render_membership(rec, dice)
        elif rec.source == "webshop":
            render_webshop(rec, dice, rates)
        elif rec.source == "rentals":
            render_rentals(rec, dice, rates)
        else:
            render_events(rec, dice)
        thin_out(rec, dice)
    assign_ids(records, dice)
    plant_unit_slips(records, dice)
    records.sort(key=record_sort_key)

    out.mkdir(parents=True, exist_ok=True)
    by_source = {s: [r for r in records if r.source == s] for s in SOURCES}
    write_membership(out / "membership.xlsx", by_source["membership"])
    write_webshop(out / "webshop.csv", by_source["webshop"])
    write_rentals(out / "rentals.jsonl", by_source["rentals"])
    write_events(out / "events.sqlite", by_source["events"])
    write_rates(out / "rates.csv", rates)
    write_truth(out / "truth", world, records, rates)
    summarise(world, records)


# --------------------------------------------------------------------------
# Big workspaces (--people N): the same world and faults, many more people
# --------------------------------------------------------------------------

BIG_CHUNK = 50_000  # people whose records are planned, rendered and written together


class BufferedGen:
    """The few generator calls the world and the renderers make, served from numpy blocks.

    A scalar call into numpy costs microseconds; a big world makes tens of millions of them, so
    uniforms and normals are drawn 65,536 at a time and handed out one by one. Deterministic per
    seed (a different stream from ``Dice``, which the committed demo keeps).
    """

    BLOCK = 1 << 16

    def __init__(self, seed: int):
        self.rng = np.random.default_rng(seed)
        self._uniforms: list[float] = []
        self._normals: list[float] = []

    def random(self) -> float:
        if not self._uniforms:
            self._uniforms = self.rng.random(self.BLOCK).tolist()
        return self._uniforms.pop()

    def normal(self, mean: float, sd: float) -> float:
        if not self._normals:
            self._normals = self.rng.standard_normal(self.BLOCK).tolist()
        return mean + sd * self._normals.pop()

    def uniform(self, lo: float, hi: float) -> float:
        return lo + (hi - lo) * self.random()

    def integers(self, lo: int, hi: int) -> int:
        """Uniform integer in [lo, hi)."""
        return lo + min(int(self.random() * (hi - lo)), hi - lo - 1)

    def choice(self, n: int, size: int | None = None, replace: bool = True, p=None):
        if size is None:
            if p is None:
                return self.integers(0, n)
            return _weighted_index(p, self.random())
        if replace or n > 16:
            return self.rng.choice(n, size=size, replace=replace, p=p)
        weights = [1.0] * n if p is None else [float(w) for w in p]
        chosen = []
        for _ in range(size):  # one weighted draw at a time, without putting back
            total = sum(weights)
            index = _weighted_index([w / total for w in weights], self.random())
            chosen.append(index)
            weights[index] = 0.0
        return chosen


def _weighted_index(p, roll: float) -> int:
    cumulative = 0.0
    last = 0
    for index, weight in enumerate(p):
        if weight > 0:
            last = index
            cumulative += weight
            if roll < cumulative:
                return index
    return last


class FastDice(Dice):
    """``Dice`` on a buffered stream: the big generator's source of randomness."""

    def __init__(self, seed: int):
        self.gen = BufferedGen(seed)


def scrambled_numbers(count: int, digits: int, salt: int) -> list[str]:
    """``count`` distinct numbers of ``digits`` digits in a scrambled order (an affine bijection
    modulo 10**digits with a multiplier coprime to 10)."""
    modulus = 10 ** digits
    assert count <= modulus
    index = np.arange(count, dtype=np.int64)
    values = (index * 7_919_981 + salt) % modulus  # 7,919,981 is coprime to 10
    return [f"{v:0{digits}d}" for v in values.tolist()]


def big_phone_pools(dice: Dice, n_people: int) -> tuple[list[str], list[str]]:
    """Mobile and landline numbers enough for ``n_people`` without sharing more than the demo.

    The fiction ranges (see MOBILE_POOL) hold 5,000 numbers; beyond them numbers come from the
    UK's 04 range, which is not allocated to any service (UK numbering plan, recalled from
    memory: check before reusing). They are written 0400 ... (mobiles) and 0410 ... (landlines).
    """
    mobiles = [MOBILE_POOL[i] for i in dice.choose_many(1000, 1000)]
    landlines = [LANDLINE_POOL[i] for i in dice.choose_many(4000, 4000)]
    want_mobiles = n_people // 4 + 100
    want_landlines = n_people + 100
    mobiles = ["400" + n for n in scrambled_numbers(max(0, want_mobiles - len(mobiles)), 7, 12_345)] + mobiles
    landlines = ["410" + n for n in scrambled_numbers(max(0, want_landlines - len(landlines)), 7, 54_321)
                 ] + landlines
    return mobiles, landlines  # popped from the end: the fiction numbers go first


def build_big_streets(dice: Dice, n_people: int) -> list[Street]:
    """Streets in proportion to the people (the demo's 160 per 5,000); a street name may recur
    in another postcode district, as in any large region."""
    words = word_list(STREET_WORDS)
    wanted = max(160, n_people * 160 // N_PEOPLE)
    names: dict[tuple[str, str], None] = {}
    while len(names) < wanted:
        district = f"{dice.pick(POSTCODE_AREAS)}{dice.integer(1, 19)}"
        names[(f"{dice.pick(words)} {dice.pick(STREET_TYPES)}", district)] = None
    streets = []
    used_units: dict[str, None] = {}
    for name, district in names:
        units = []
        while len(units) < dice.integer(1, 3):
            unit = (f"{district} {dice.integer(1, 9)}"
                    f"{dice.pick(INWARD_LETTERS)}{dice.pick(INWARD_LETTERS)}")
            if unit not in used_units:
                used_units[unit] = None
                units.append(unit)
        streets.append(Street(name, district, units, dice.integer(12, 180)))
    return streets


@dataclass
class _People:
    """A slice of the world's people, for planning their records (plan_records reads .people)."""

    people: list[Person]


def assign_ids_continuing(records: list[Record], dice: Dice, numbers: dict[str, int]) -> None:
    """``assign_ids`` for one chunk of records, carrying each desk's last number across chunks."""
    by_source: dict[str, list[Record]] = defaultdict(list)
    for rec in records:
        by_source[rec.source].append(rec)
    for source, recs in by_source.items():
        shuffled = [recs[i] for i in dice.choose_many(len(recs), len(recs))]
        ordered = shuffled if source == "webshop" else sorted(shuffled, key=lambda r: r.day)
        number = numbers.get(source, 0)
        for rec in ordered:
            if source == "membership":
                number += dice.integer(1, 3)
                rec.record_id = f"M-{number:07d}"
            elif source == "webshop":
                number += dice.integer(1, 40)
                rec.record_id = f"W{100000 + number}"
            elif source == "rentals":
                number += dice.integer(1, 2)
                rec.record_id = f"R-{number:07d}"
            else:
                number += 1 if dice.chance(0.95) else dice.integer(2, 4)
                rec.record_id = str(number)
        numbers[source] = number


class BigWriters:
    """The four department files and the truth, written chunk by chunk."""

    def __init__(self, out: Path):
        self.out = out
        (out / "truth").mkdir(parents=True, exist_ok=True)
        self.sheet = BigSheet(out / "membership.xlsx")
        self.webshop = open(out / "webshop.csv", "w", encoding="utf-8", newline="")
        self.webshop_csv = csv.writer(self.webshop, lineterminator="\n", delimiter=WEBSHOP_DELIMITER)
        self.webshop_csv.writerow(WEBSHOP_COLUMNS)
        self.rentals = open(out / "rentals.jsonl", "w", encoding="utf-8", newline="\n")
        events = out / "events.sqlite"
        if events.exists():
            events.unlink()
        self.events = sqlite3.connect(events)
        self.events.execute(
            "CREATE TABLE signups (signup_id INTEGER PRIMARY KEY, given TEXT, surname TEXT, "
            "email TEXT, birth_year INTEGER, fee REAL, event_name TEXT, event_date TEXT)")
        self.truth = {}
        for name, header in (("crosswalk", CROSSWALK_COLUMNS),
                             ("entities", ENTITY_COLUMNS),
                             ("record_faults", ("source", "record_id", "faults"))):
            handle = open(out / "truth" / f"{name}.csv", "w", encoding="utf-8", newline="")
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(header)
            self.truth[name] = (handle, writer)

    def write(self, world: World, people: list[Person], records: list[Record], rates: Rates) -> None:
        records.sort(key=record_sort_key)
        self.sheet.append([[rec.record_id] + [rec.row[c] for c in MEMBERSHIP_COLUMNS[1:]]
                           for rec in records if rec.source == "membership"])
        self.webshop_csv.writerows([rec.record_id] + [rec.row[c] for c in WEBSHOP_COLUMNS[1:]]
                                   for rec in records if rec.source == "webshop")
        self.rentals.writelines(json.dumps({"rental_ref": rec.record_id, **rec.row}, ensure_ascii=False) + "\n"
                                for rec in records if rec.source == "rentals")
        self.events.executemany(
            "INSERT INTO signups VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            [(int(rec.record_id), rec.row["given"], rec.row["surname"], rec.row["email"],
              rec.row["birth_year"], rec.row["fee"], rec.row["event_name"], rec.row["event_date"])
             for rec in records if rec.source == "events"])
        self.truth["crosswalk"][1].writerows(crosswalk_rows(records))
        self.truth["record_faults"][1].writerows((r.source, r.record_id, ";".join(r.faults)) for r in records)
        self.truth["entities"][1].writerows(entity_rows(_People(people), records, rates))

    def close(self) -> None:
        self.events.commit()
        self.events.close()
        self.webshop.close()
        self.rentals.close()
        for handle, _ in self.truth.values():
            handle.close()
        self.sheet.close()


class BigSheet:
    """The membership workbook of a big workspace, its rows streamed as sheet XML.

    openpyxl builds an object per cell, which costs more than the rest of the generator; here
    openpyxl writes a template workbook (header row, styles for the date and number formats) and
    the rows go straight into the sheet's XML (inline strings, Office Open XML, ECMA-376 part 1
    section 18.3), staged in a file beside the workbook.
    """

    EPOCH = dt.datetime(1899, 12, 30)  # day 0 of the 1900 date system (ECMA-376 section 18.17.4)
    LETTERS = "ABCDEFGHI"

    def __init__(self, path: Path):
        self.path = path
        self.staging = path.with_name(path.name + ".rows")
        self.handle = open(self.staging, "w", encoding="utf-8")
        self.rows = 1
        self.styles = self._template_styles()

    def _template(self, with_sample: bool) -> bytes:
        workbook = openpyxl.Workbook()
        sheet = workbook.active
        sheet.title = "Members"
        sheet.append(MEMBERSHIP_COLUMNS)
        for cell in sheet[1]:
            cell.font = Font(bold=True)
        if with_sample:  # one row that shows which style number each format got
            sheet.append(["x", "x", "x", FIXED_FILE_TIME, "x", "x", 1.0, 1.0, "x"])
            row = sheet[2]
            row[3].number_format = "dd/mm/yyyy"
            row[6].number_format = "0.0"
            row[7].number_format = "0.00"
        for letter, width in zip(self.LETTERS, MEMBERSHIP_WIDTHS, strict=True):
            sheet.column_dimensions[letter].width = width
        workbook.properties.creator = "Tallow Creek membership office (invented demo)"
        workbook.properties.title = "Members"
        workbook.properties.created = FIXED_FILE_TIME
        workbook.properties.modified = FIXED_FILE_TIME
        buffer = io.BytesIO()
        workbook.save(buffer)
        return buffer.getvalue()

    def _template_styles(self) -> dict[int, str]:
        with zipfile.ZipFile(io.BytesIO(self._template(True))) as book:
            xml = book.read("xl/worksheets/sheet1.xml").decode()
        self.template = self._template(True)
        row = xml[xml.index('<row r="2"'):]
        return {index: re.search(rf'<c r="{letter}2" s="(\d+)"', row).group(1)
                for index, letter in ((3, "D"), (6, "G"), (7, "H"))}

    @staticmethod
    def _text(value: str) -> str:
        escaped = value.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
        space = ' xml:space="preserve"' if value != value.strip() or "  " in value else ""
        return f"<is><t{space}>{escaped}</t></is>"

    def append(self, rows: list[list]) -> None:
        parts = []
        for row in rows:
            self.rows += 1
            r = self.rows
            parts.append(f'<row r="{r}">')
            for index, value in enumerate(row):
                if value is None:
                    continue
                ref = f"{self.LETTERS[index]}{r}"
                if isinstance(value, dt.datetime):
                    serial = (value - self.EPOCH).days
                    parts.append(f'<c r="{ref}" s="{self.styles[3]}" t="n"><v>{serial}</v></c>')
                elif isinstance(value, float):
                    parts.append(f'<c r="{ref}" s="{self.styles[index]}" t="n"><v>{value!r}</v></c>')
                else:
                    parts.append(f'<c r="{ref}" t="inlineStr">{self._text(str(value))}</c>')
            parts.append("</row>")
        self.handle.write("".join(parts))

    def close(self) -> None:
        self.handle.close()
        with zipfile.ZipFile(io.BytesIO(self.template)) as template:
            xml = template.read("xl/worksheets/sheet1.xml").decode()
            head = xml[:xml.index('<row r="2"')]
            head = re.sub(r'<dimension ref="[^"]*"', f'<dimension ref="A1:I{self.rows}"', head)
            tail = xml[xml.index("</sheetData>"):]
            members = {i.filename: template.read(i.filename) for i in template.infolist()}
        write_reproducible_zip(self.path, b"", members=members, sheet=(head, self.staging, tail))
        self.staging.unlink()


def copy_mappings(workspace: Path) -> None:
    """The demo's mapping files beside the big sources, so the folder is a workspace."""
    here = Path(__file__).resolve().parent
    target = workspace / "mappings"
    target.mkdir(parents=True, exist_ok=True)
    for path in sorted((here.parent / "mappings").glob("*.yaml")):
        target.joinpath(path.name).write_text(path.read_text(encoding="utf-8"), encoding="utf-8")


def generate_big(workspace: Path, n_people: int, seed: int = SEED, quiet: bool = False) -> None:
    """A workspace of ``n_people`` invented people: sources under DIR/demo_sources (the four
    formats, rates and truth) and the demo's mappings under DIR/mappings.

    The world is built whole (addresses, e-mails and phones are unique across it); records are
    planned, damaged and written BIG_CHUNK people at a time, so memory holds the people but only
    one chunk of records.
    """
    started = dt.datetime.now()
    out = workspace / "demo_sources"
    out.mkdir(parents=True, exist_ok=True)
    dice = FastDice(seed)
    rates = Rates(dice)
    world = World(dice, n_people, streets=build_big_streets(dice, n_people),
                  phones=big_phone_pools(dice, n_people))
    programme = build_event_programme(dice)
    writers = BigWriters(out)
    numbers: dict[str, int] = {}
    total = Counter()
    for start in range(0, len(world.people), BIG_CHUNK):
        people = world.people[start:start + BIG_CHUNK]
        records = plan_records(_People(people), dice, programme)
        render_records(records, dice, rates)
        assign_ids_continuing(records, dice, numbers)
        plant_unit_slips(records, dice)
        writers.write(world, people, records, rates)
        total.update(r.source for r in records)
        if not quiet:
            print(f"  {start + len(people):,} of {len(world.people):,} people", flush=True)
    writers.close()
    write_rates(out / "rates.csv", rates)
    copy_mappings(workspace)
    seconds = (dt.datetime.now() - started).total_seconds()
    print("records per source:", ", ".join(f"{s}={total[s]}" for s in SOURCES),
          f"(total {sum(total.values())}); {len(world.people)} people; {seconds:.0f} s")


def render_records(records: list[Record], dice: Dice, rates: Rates) -> None:
    for rec in records:
        if rec.source == "membership":
            render_membership(rec, dice)
        elif rec.source == "webshop":
            render_webshop(rec, dice, rates)
        elif rec.source == "rentals":
            render_rentals(rec, dice, rates)
        else:
            render_events(rec, dice)
        thin_out(rec, dice)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", type=Path, default=None,
                        help="output folder (default: the folder of this script); with --people, "
                             "a workspace folder that gets demo_sources/ and mappings/")
    parser.add_argument("--people", type=int, default=None,
                        help="make a big workspace of this many invented people (about 1.8 records "
                             "each) instead of the committed 5,000-people demo")
    parser.add_argument("--seed", type=int, default=SEED, help=f"random seed (default {SEED})")
    args = parser.parse_args()
    if args.people is None:
        if args.seed != SEED:
            parser.error("--seed applies to --people workspaces; the committed demo uses its own seed")
        generate(args.out or Path(__file__).resolve().parent)
        return
    if args.out is None:
        parser.error("--people needs --out DIR (the workspace folder to create)")
    if args.people < 10:
        parser.error("--people must be at least 10")
    generate_big(args.out, args.people, args.seed)


if __name__ == "__main__":
    main()
