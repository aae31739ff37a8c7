"""The words Waypath retired (issue 14), read from tests/retired-words.txt.

The list and its matching rule are shared with library/tests/own_words.rs: an
entry is found where it starts a word (the character before it is not a
letter, a digit or `_`), case-sensitive.
"""
from conftest import REPO

LIST = REPO / "tests" / "retired-words.txt"


def retired():
    """(retired text, what replaced it) for every entry of the list."""
    entries = []
    for line in LIST.read_text(encoding="utf-8").splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        old, _, now = line.partition("\t")
        assert now, f"no tab in the list line {line!r}"
        entries.append((old, now))
    return entries


def starts_a_word_in(pattern, text):
    at = text.find(pattern)
    while at != -1:
        before = text[at - 1] if at > 0 else " "
        if not (before.isalnum() or before == "_"):
            return True
        at = text.find(pattern, at + 1)
    return False


def found_in(text):
    """Every retired entry found in `text`, as "`old` (now: …)"."""
    return [f"`{old}` (now: {now})" for old, now in retired() if starts_a_word_in(old, text)]
