"""Character-level differences between two values, for showing a pair side by side.

Example:
    >>> a, b = diff_segments("Smith", "Smyth")
    >>> a
    [('Sm', False), ('i', True), ('th', False)]
    >>> b
    [('Sm', False), ('y', True), ('th', False)]
"""

from __future__ import annotations

from difflib import SequenceMatcher

Segments = list[tuple[str, bool]]  # (text, differs from the other value)


def _append(out: Segments, text: str, changed: bool) -> None:
    if not text:
        return
    if out and out[-1][1] == changed:
        out[-1] = (out[-1][0] + text, changed)
    else:
        out.append((text, changed))


def diff_segments(a: str, b: str) -> tuple[Segments, Segments]:
    """Split both values into runs that agree with the other value and runs that do not.

    Letter case is ignored when matching characters (a case-only difference is not what a
    reviewer needs to see), but the text keeps its case.
    """
    matcher = SequenceMatcher(None, a.casefold(), b.casefold(), autojunk=False)
    left: Segments = []
    right: Segments = []
    if len(a.casefold()) != len(a) or len(b.casefold()) != len(b):
        # casefolding changed a length (e.g. 'ß' -> 'ss'): compare the text as it is
        matcher = SequenceMatcher(None, a, b, autojunk=False)
    for tag, i1, i2, j1, j2 in matcher.get_opcodes():
        changed = tag != "equal"
        _append(left, a[i1:i2], changed)
        _append(right, b[j1:j2], changed)
    return left, right


def caret_line(segments: Segments) -> str:
    """A line of ``^`` under the characters that differ (for the terminal).

    Example:
        >>> caret_line([('Sm', False), ('y', True), ('th', False)])
        '  ^'
    """
    return "".join(("^" if changed else " ") * len(text) for text, changed in segments).rstrip()
