"""Phone numbers to E.164 with a declared country: an ISO 3166 code, or a calling code ('+383').

The phonenumbers library knows the numbering plans of the assigned calling codes. A workspace
may also declare calling codes it does not know (a new or private plan) with their national
prefix and, optionally, the lengths of their national numbers; for those, E.164 is built here
from the rules every plan shares (ITU-T E.164 and E.123; the national-prefix and '00'
international-prefix conventions are common practice):

- ``+CC ...`` and ``00CC ...`` are international: the digits after the calling code are the number;
- a number starting with the national prefix is national: the prefix is dropped;
- ``0CC...`` (the national prefix written before the calling code) is read as international only
  when the digits after it have one of the declared national lengths;
- any other number is national already.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import phonenumbers

_CALLING = re.compile(r"^\+?(\d{1,3})$")


@dataclass(frozen=True)
class CallingCode:
    """A calling code phonenumbers does not know, as the workspace declares it."""

    code: str  # digits, no '+'
    national_prefix: str = "0"
    national_digits: tuple[int, ...] = ()  # lengths of national numbers (without prefix); () = any


def calling_code_of(country: str) -> str | None:
    """The calling code of an ISO 3166 alpha-2 code or of '+CC' / 'CC' text (None if neither).

    Example:
        >>> calling_code_of("GB"), calling_code_of("+383"), calling_code_of("de")
        ('44', '383', '49')
    """
    text = country.strip()
    found = _CALLING.match(text)
    if found:
        return found.group(1)
    code = phonenumbers.country_code_for_region(text.upper())
    return str(code) if code else None


def is_country(text: str, custom: dict[str, CallingCode] | None = None) -> bool:
    """True for an ISO 3166 alpha-2 code phonenumbers knows, or a calling code it or ``custom`` knows."""
    found = _CALLING.match(text.strip())
    if found:
        code = found.group(1)
        return code in (custom or {}) or phonenumbers.region_code_for_country_code(int(code)) != "ZZ"
    return phonenumbers.country_code_for_region(text.strip().upper()) != 0


def _digits(text: str) -> str:
    return re.sub(r"\D", "", text)


def _custom_e164(text: str, cc: CallingCode) -> str | None:
    digits = _digits(text)
    if not digits:
        return None
    stripped = text.strip()
    if stripped.startswith("+") or digits.startswith("00"):
        rest = digits[2:] if not stripped.startswith("+") else digits
        if not rest.startswith(cc.code):
            return None  # another country's number: the caller asks phonenumbers
        national = rest[len(cc.code):]
    elif cc.national_prefix and digits.startswith(cc.national_prefix):
        rest = digits[len(cc.national_prefix):]
        after = rest[len(cc.code):]
        if cc.national_digits and rest.startswith(cc.code) and len(after) in cc.national_digits:
            national = after  # '0CC...': the national prefix written before the calling code
        else:
            national = rest
    else:
        national = digits
    if cc.national_digits and len(national) not in cc.national_digits:
        return None
    if not 1 <= len(cc.code + national) <= 15:  # E.164: at most 15 digits
        return None
    return f"+{cc.code}{national}"


def to_e164(text: str, country: str | None, custom: dict[str, CallingCode] | None = None) -> str | None:
    """A phone number in E.164 form ('+447700900123'), or its digits when it cannot be read.

    ``country`` is the default for numbers written without an international prefix: ISO 3166
    alpha-2 ('GB') or a calling code ('+44', or one declared in ``custom``). Uses "possible"
    rather than "valid": numbers reserved for fiction are possible but not valid.

    Example:
        >>> to_e164("07700 900123", "GB")
        '+447700900123'
        >>> to_e164("0044 20 7946 0123", "+44")
        '+442079460123'
        >>> plan = {"999": CallingCode("999", "0", (9,))}
        >>> [to_e164(t, "+999", plan) for t in ("+999 75 043 5081", "(075) 043-5081", "0999750435081",
        ...                                       "00999 750435081")]
        ['+999750435081', '+999750435081', '+999750435081', '+999750435081']
    """
    custom = custom or {}
    home = calling_code_of(country) if country else None
    if home in custom:
        found = _custom_e164(text, custom[home])
        if found:
            return found
    elif text.strip().startswith("+") or _digits(text).startswith("00"):
        digits = _digits(text)
        digits = digits if text.strip().startswith("+") else digits[2:]
        for code, plan in custom.items():  # an international number in a declared plan
            if digits.startswith(code):
                found = _custom_e164("+" + digits, plan)
                if found:
                    return found
    region = None
    if country:
        found_cc = _CALLING.match(country.strip())
        region = phonenumbers.region_code_for_country_code(int(found_cc.group(1))) if found_cc else country.upper()
        region = None if region == "ZZ" else region
    try:
        number = phonenumbers.parse(text, region)
    except phonenumbers.NumberParseException:
        return _digits(text) or None
    if not phonenumbers.is_possible_number(number):
        return _digits(text) or None
    return phonenumbers.format_number(number, phonenumbers.PhoneNumberFormat.E164)
