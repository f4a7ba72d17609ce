"""The optional ``[metadata]`` table of a study: who made the data and under which licence.

These fields become the discovery attributes (ACDD 1.3: ``creator_name``, ``creator_email``,
``institution``, ``project``, ``keywords``, ``license``, ``references``) of every file written
from the study.  None is required; a field not given is left out of the files rather than
filled with a placeholder.

```toml
[metadata]
creator_name = "A. Researcher"
creator_email = "a.researcher@example.org"
institution = "Example University"
project = "Mixing in paddle tanks"
keywords = ["chaotic mixing", "tracer dispersion"]
license = "CC-BY-4.0"        # the licence of the data files (not of eddyhop)
references = "doi:10.1234/example"
```
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ..errors import StudyError

TEXT_FIELDS = ("creator_name", "creator_email", "creator_url", "institution", "project",
               "license", "references", "acknowledgement")
FIELDS = (*TEXT_FIELDS, "keywords")
MAX_TEXT = 500  # characters: an attribute, not a document
_EMAIL = re.compile(r"[^@\s]+@[^@\s]+\.[^@\s]+")


@dataclass(frozen=True)
class MetadataSpec:
    """Discovery metadata of a study (all optional; empty string = not given)."""

    creator_name: str = ""
    creator_email: str = ""
    creator_url: str = ""
    institution: str = ""
    project: str = ""
    license: str = ""
    references: str = ""
    acknowledgement: str = ""
    keywords: tuple = ()

    def attrs(self) -> dict:
        """The fields that were given, as flat netCDF attributes (keywords comma-separated).

        >>> parse_metadata({"creator_name": "A. Researcher", "keywords": ["mixing", "eddies"]}
        ...                ).attrs()
        {'creator_name': 'A. Researcher', 'keywords': 'mixing, eddies'}
        """
        out = {name: getattr(self, name) for name in TEXT_FIELDS if getattr(self, name)}
        if self.keywords:
            out["keywords"] = ", ".join(self.keywords)
        return out


def _bad(key, value, allowed) -> StudyError:
    shown = value if not isinstance(value, str) or len(value) <= 60 else value[:57] + "..."
    return StudyError(f"metadata.{key} = {shown!r} is not allowed: {allowed}")


def _clean_text(key, value) -> str:
    if not isinstance(value, str):
        raise _bad(key, value, "give a string")
    text = value.strip()
    if not text:
        raise _bad(key, value, "give a non-empty string or leave the key out")
    if len(text) > MAX_TEXT:
        raise _bad(key, value, f"at most {MAX_TEXT} characters")
    if any(ord(c) < 32 and c not in "\t" for c in text):
        raise _bad(key, value, "one line of text (no control characters or line breaks)")
    return text


def parse_metadata(table) -> MetadataSpec:
    """Validate the ``[metadata]`` table (a dict from TOML); raises StudyError naming the key."""
    if table is None:
        return MetadataSpec()
    if not isinstance(table, dict):
        raise StudyError(f"study.metadata: expected a table, got {type(table).__name__}")
    unknown = sorted(set(table) - set(FIELDS))
    if unknown:
        raise StudyError(f"metadata: unknown key(s) {', '.join(map(repr, unknown))}; "
                         f"allowed: {', '.join(sorted(FIELDS))}")
    values = {key: _clean_text(key, table[key]) for key in TEXT_FIELDS if key in table}
    email = values.get("creator_email")
    if email is not None and not _EMAIL.fullmatch(email):
        raise _bad("creator_email", email, "an e-mail address such as name@example.org")
    url = values.get("creator_url")
    if url is not None and not re.match(r"https?://\S+$", url):
        raise _bad("creator_url", url, "a web address starting with http:// or https://")
    keywords = table.get("keywords", [])
    if isinstance(keywords, str):
        keywords = [k for k in (part.strip() for part in keywords.split(",")) if k]
    if not isinstance(keywords, list):
        raise _bad("keywords", keywords, "a list of strings")
    cleaned = []
    for word in keywords:
        word = _clean_text("keywords", word)
        if "," in word:
            raise _bad("keywords", word, "one keyword per list item (no commas inside one)")
        cleaned.append(word)
    return MetadataSpec(keywords=tuple(cleaned), **values)
