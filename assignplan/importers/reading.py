"""Input files of the importers: their bytes, what they look like, and their text.

Each importer expects one kind of file (an SWF trace, a CSV table, a JSON inventory). Given
another kind, it says in one line what the file looks like instead, rather than listing every
line that fails to parse as the kind it expected.
"""

from __future__ import annotations

import re
from pathlib import Path

from assignplan.errors import InputError

_UTF8_BOM = b"\xef\xbb\xbf"
_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")
# Common practice (as in version-control tools' binary detection): a NUL byte in the first
# few KiB means binary; so does a large share of undecodable bytes and control characters,
# which a Latin-1 text file with a few accented letters stays far below.
_SNIFF_BYTES = 8192
_BINARY_SHARE = 0.10
_CONTROL = re.compile(r"[\x00-\x08\x0e-\x1f\x7f\ufffd]")
# A number as spreadsheets and traces write it (no "1_000", "1,5", "nan" or "inf").
NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
SWF_FIELDS = 18

# What each kind of file is called when a person is told what a file looks like.
LOOKS = {
    "empty": "an empty file",
    "binary": "a binary file",
    "utf16": "UTF-16 text",
    "json": "JSON",
    "swf": "an SWF trace",
    "numbers": "a table of numbers",
    "csv": "a CSV table",
    "text": "plain text",
}


def looks_like(data: bytes) -> str:
    """The kind of content: a key of `LOOKS`, judged from the first meaningful line."""
    if data.startswith(_UTF16_BOMS):
        return "utf16"
    sample = data.removeprefix(_UTF8_BOM)[:_SNIFF_BYTES]
    if not sample.strip():
        return "empty"
    text = sample.decode("utf-8", errors="replace")
    if b"\0" in sample or len(_CONTROL.findall(text)) > _BINARY_SHARE * len(text):
        return "binary"
    if text.lstrip()[0] in "{[":
        return "json"
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    # An SWF comment is ';' then free text; a ';'-separated row with an empty first cell has
    # more separators, and is data.
    data_lines = [line for line in lines if not (line.startswith(";") and ";" not in line[1:])]
    first = data_lines[0] if data_lines else ""
    tokens = first.split()
    if tokens and all(NUMBER.fullmatch(t) for t in tokens):
        return "swf" if len(tokens) == SWF_FIELDS else "numbers"
    if not data_lines:
        return "swf"  # only ';' header lines: a trace without jobs
    if any(sep in first for sep in ",;\t"):
        return "csv"
    return "text"


def wrong_kind(path: Path | str, kind: str, expected: str) -> InputError:
    """The one-line problem of a file of kind `kind` given where `expected` was wanted;
    `expected` names the kind and says what it holds. A UTF-16 file may well be the expected
    kind, only in the wrong encoding."""
    if kind == "utf16":
        return InputError(f"{path}: UTF-16 text; save it with the UTF-8 encoding")
    if kind == "empty":
        return InputError(f"{path}: empty file, not {expected}")
    return InputError(f"{path}: looks like {LOOKS[kind]}, not {expected}")


