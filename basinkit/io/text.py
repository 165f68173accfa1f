"""Reading small text files (outlet tables, job files): decoding with byte-order marks and
a stated fallback, telling binary and JSON files from tables, and finding a CSV's delimiter.

Every refusal is an :class:`~basinkit.errors.InputError` that names the file, what is wrong
and what to do.
"""

from __future__ import annotations

import codecs
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError

__all__ = ["TextFile", "read_text", "binary_kind", "sniff_delimiter", "DELIMITERS"]

# magic numbers of files that are often given by mistake (from each format's
# specification: TIFF 6.0, PNG, SQLite, ZIP (also .xlsx, .docx), PDF, gzip)
_MAGIC = [
    (b"II*\x00", "a TIFF image"), (b"MM\x00*", "a TIFF image"),
    (b"II+\x00", "a BigTIFF image"), (b"MM\x00+", "a BigTIFF image"),
    (b"\x89PNG\r\n\x1a\n", "a PNG image"), (b"SQLite format 3\x00", "a GeoPackage/SQLite file"),
    (b"PK\x03\x04", "a ZIP archive (or an .xlsx/.docx document)"), (b"%PDF", "a PDF document"),
    (b"\x1f\x8b", "a gzip archive"), (b"\xd0\xcf\x11\xe0", "an old Office document (.xls)"),
]
DELIMITERS = (",", ";", "\t", "|")
FALLBACK_ENCODING = "cp1252"  # what spreadsheet programs on Windows write by default


@dataclass
class TextFile:
    """A decoded text file.

    Attributes
    ----------
    text : str
        The content, without a byte-order mark.
    encoding : str
        The encoding used (``utf-8``, ``utf-16``, or the fallback ``cp1252``).
    notes : list of str
        What the reader had to assume (a fallback encoding), to be shown to the user.
    """

    text: str
    encoding: str
    notes: list = field(default_factory=list)


def binary_kind(data: bytes):
    """What a binary file is (``"a TIFF image"``, ...), ``"a binary file"`` for other bytes
    with NULs, or None for text.

    Examples
    --------
    >>> binary_kind(b"II*\\x00rest"), binary_kind(b"id,x,y\\n")
    ('a TIFF image', None)
    """
    for magic, what in _MAGIC:
        if data.startswith(magic):
            return what
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return None
    if b"\x00" in data[:8192]:
        return "a binary file"
    return None


def read_text(path, what: str, *, fallback: str | None = FALLBACK_ENCODING) -> TextFile:
    """Read a text file: UTF-8 with or without a byte-order mark, UTF-16 with one, or --
    when the bytes are not UTF-8 and ``fallback`` is given -- that encoding, with a note.

    Parameters
    ----------
    path : str or Path
    what : str
        How messages name the file (``"the outlet table"``).
    fallback : str or None
        Encoding for bytes that are not UTF-8 (default cp1252, a superset of the printable
        latin-1); None refuses them instead, naming the first bad byte and its line.

    Raises
    ------
    InputError
        The file is missing, a folder, empty, binary, or (without fallback) not UTF-8.
    """
    p = Path(path)
    if not p.exists():
        raise InputError(f"{what} {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"{what} {str(p)!r} is a folder, not a file")
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read {what} {str(p)!r}: {exc.strerror or exc}") from None
    kind = binary_kind(data)
    if kind is not None:
        raise InputError(f"{what} {str(p)!r} is {kind}, not a text file; give the right "
                         "file")
    if data.startswith(codecs.BOM_UTF8):
        body, enc = data[len(codecs.BOM_UTF8):], "utf-8"
    elif data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        body, enc = data, "utf-16"
    else:
        body, enc = data, "utf-8"
    notes = []
    try:
        text = body.decode(enc)
    except UnicodeDecodeError as exc:
        line = body[:exc.start].count(b"\n") + 1
        bad = body[exc.start:exc.start + 1].hex().upper()
        if fallback is None or enc != "utf-8":
            raise InputError(f"{what} {str(p)!r} is not {enc.upper()} text (byte 0x{bad} on "
                             f"line {line}); save it as UTF-8") from None
        try:
            text = body.decode(fallback)
        except UnicodeDecodeError:
            raise InputError(f"{what} {str(p)!r} is neither UTF-8 nor {fallback} text (byte "
                             f"0x{bad} on line {line}); save it as UTF-8") from None
        enc = fallback
        notes.append(f"{what} {p.name!r} is not UTF-8 (byte 0x{bad} on line {line}); read "
                     f"it as {fallback} (Windows Western European); save it as UTF-8 to "
                     "be sure of its accented letters")
    if not text.strip():
        raise InputError(f"{what} {str(p)!r} is empty")
    return TextFile(text, enc, notes)


def sniff_delimiter(lines, default=","):
    """The field delimiter of a table from its first lines: the candidate (``,``, ``;``,
    tab, ``|``) that occurs in the header and the same number of times on most lines.
    Quoted fields are respected.

    Examples
    --------
    >>> sniff_delimiter(["id;x;y", "a;1,5;2,5"])
    ';'
    >>> sniff_delimiter(["id,x,y", "a,1,2"])
    ','
    """
    import csv

    sample = [ln for ln in lines[:50] if ln.strip()]
    if not sample:
        return default
    best, best_score = default, (-1, -1)
    for d in DELIMITERS:
        counts = [len(next(csv.reader([ln], delimiter=d))) - 1 for ln in sample]
        if counts[0] == 0:
            continue
        same = sum(1 for c in counts if c == counts[0])
        score = (same, counts[0])
        if score > best_score:
            best, best_score = d, score
    return best
