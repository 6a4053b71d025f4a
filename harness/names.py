"""The one rule for names a suite gives to itself, its datasets and its strategies (they
become folder names and table labels): letters, digits, ``- _ .``, starting with a letter or
a digit."""

from __future__ import annotations

import re
import unicodedata

_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.\-]*")
RULE = "letters, digits, - _ ., starting with a letter or digit"


def is_name(text: object) -> bool:
    return isinstance(text, str) and _NAME.fullmatch(text) is not None


def make_name(text: str, fallback: str = "data") -> str:
    """``text`` made into a name: accents dropped, other characters become ``-``."""
    ascii_text = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode()
    name = re.sub(r"[^A-Za-z0-9_.\-]+", "-", ascii_text)
    name = re.sub(r"^[^A-Za-z0-9]+", "", name).rstrip("-.")
    return name or fallback
