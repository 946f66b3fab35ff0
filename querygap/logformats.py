"""What a log file is: its format, encoding, delimiter and which columns hold which field.

Pure functions over a few sample bytes, plus :func:`sniff_log` which reads those bytes from disk.
Auto-detection maps common header spellings (case and punctuation ignored) to our fields; the
``--column FIELD=NAME`` option overrides it.
"""

from __future__ import annotations

import codecs
import gzip
import json
import re
import zlib
from dataclasses import dataclass, field
from pathlib import Path

from querygap.errors import InputError

FIELDS = ("query", "timestamp", "session", "user", "results", "clicks")
REQUIRED = ("query", "timestamp")

# Header spellings we recognise, compared after lower-casing and dropping non-alphanumerics.
ALIASES: dict[str, tuple[str, ...]] = {
    "query": (
        "query",
        "q",
        "search",
        "searchterm",
        "searchterms",
        "searchquery",
        "searchtext",
        "querytext",
        "term",
        "terms",
        "keyword",
        "keywords",
        "searchstring",
        "querystring",
        "searchphrase",
    ),
    "timestamp": (
        "timestamp",
        "time",
        "ts",
        "datetime",
        "eventtime",
        "searchedat",
        "searchtime",
        "createdat",
        "date",
        "when",
        "occurredat",
        "loggedat",
    ),
    "session": ("session", "sessionid", "sid", "sessionkey", "visit", "visitid"),
    "user": (
        "user",
        "userid",
        "visitor",
        "visitorid",
        "client",
        "clientid",
        "uid",
        "cookie",
        "cookieid",
        "deviceid",
        "anonymousid",
        "userkey",
    ),
    "results": (
        "results",
        "resultcount",
        "resultscount",
        "numresults",
        "nresults",
        "hits",
        "totalresults",
        "resultsshown",
        "hitcount",
        "matches",
        "found",
    ),
    "clicks": (
        "clicks",
        "clicked",
        "clickcount",
        "nclicks",
        "numclicks",
        "resultclicks",
        "clickthroughs",
    ),
}

FORMATS = ("csv", "tsv", "jsonl", "parquet")
DELIMITERS = (",", ";", "\t", "|")


@dataclass(frozen=True)
class LogLayout:
    """How to read one log file."""

    path: Path
    format: str  # csv, tsv, jsonl or parquet
    compressed: bool
    encoding: str  # utf-8, utf-16 or latin-1 (DuckDB's names)
    delimiter: str
    columns: tuple[str, ...]  # the file's columns (or JSON keys) in order
    mapping: dict[str, str] = field(default_factory=dict)  # our field -> file column
    crlf: bool = False  # lines end in CR LF (JSON Lines is read line by line with this ending)

    @property
    def ignored(self) -> tuple[str, ...]:
        """The file's columns that no field uses; they are not stored."""
        used = set(self.mapping.values())
        return tuple(c for c in self.columns if c not in used)


def _key(name: str) -> str:
    return re.sub(r"[^0-9a-z]", "", name.casefold())


def detect_format(path: Path, declared: str | None = None) -> tuple[str, bool]:
    """Format and compression from the file name (``declared`` wins for the format)."""
    suffixes = [s.lower() for s in path.suffixes]
    compressed = bool(suffixes) and suffixes[-1] in (".gz", ".gzip")
    if compressed:
        suffixes = suffixes[:-1]
    if declared:
        if declared not in FORMATS:
            raise InputError(
                f"{path}: --format must be one of {', '.join(FORMATS)}, not '{declared}'"
            )
        return declared, compressed
    ext = suffixes[-1] if suffixes else ""
    by_ext = {
        ".csv": "csv",
        ".tsv": "tsv",
        ".tab": "tsv",
        ".jsonl": "jsonl",
        ".ndjson": "jsonl",
        ".json": "jsonl",
        ".parquet": "parquet",
        ".pq": "parquet",
        ".txt": "csv",
    }
    if ext not in by_ext:
        raise InputError(
            f"{path}: cannot tell the format from the name '{path.name}'; "
            f"pass --format with one of {', '.join(FORMATS)}"
        )
    return by_ext[ext], compressed


def detect_encoding(
    sample: bytes, declared: str | None = None, source: str = "log"
) -> tuple[str, bytes]:
    """The encoding (from a BOM, else UTF-8) and the sample with the BOM removed."""
    if declared:
        name = declared.lower().replace("_", "-")
        aliases = {"utf8": "utf-8", "latin1": "latin-1", "iso-8859-1": "latin-1", "utf16": "utf-16"}
        name = aliases.get(name, name)
        if name not in ("utf-8", "utf-16", "latin-1"):
            raise InputError(f"--encoding must be utf-8, utf-16 or latin-1, not '{declared}'")
        return name, sample
    if sample.startswith(codecs.BOM_UTF8):
        return "utf-8", sample[len(codecs.BOM_UTF8) :]
    if sample.startswith(codecs.BOM_UTF16_BE):
        # DuckDB's reader decodes UTF-16 little-endian only; big-endian would read as no rows.
        raise InputError(
            f"{source}: the file is UTF-16 big-endian, which the reader does not decode; convert "
            "it first, e.g. iconv -f UTF-16BE -t UTF-8"
        )
    if sample.startswith(codecs.BOM_UTF16_LE):
        return "utf-16", sample
    if b"\x00" in sample[:4096]:
        raise InputError(
            f"{source}: the file has NUL bytes, so it is binary or UTF-16 without a byte-order "
            "mark; pass --encoding utf-16 for the latter, or check it is a log"
        )
    return "utf-8", sample


def decode_sample(sample: bytes, encoding: str) -> str:
    """Decode the sample for sniffing; an undecodable tail (a cut character) is ignored."""
    codec = {"utf-8": "utf-8", "utf-16": "utf-16", "latin-1": "latin-1"}[encoding]
    return sample.decode(codec, errors="replace")


def split_header(text: str, fmt: str, declared: str | None, source: str) -> tuple[str, list[str]]:
    """The delimiter and the column names from a delimited file's first line."""
    first = text.lstrip("\ufeff").splitlines()[0] if text.strip() else ""
    if not first.strip():
        raise InputError(f"{source}:1: the file is empty; a log needs a header line and rows")
    if declared:
        delim = (
            declared.encode().decode("unicode_escape") if declared.startswith("\\") else declared
        )
    elif fmt == "tsv":
        delim = "\t"
    else:
        delim = max(DELIMITERS, key=lambda d: (first.count(d), d == ","))
    import csv
    import io

    names = next(csv.reader(io.StringIO(first), delimiter=delim))
    names = [n.strip() for n in names]
    if any(not n for n in names):
        raise InputError(f"{source}:1: the header has an empty column name: {first[:200]!r}")
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise InputError(f"{source}:1: the header names column(s) {dupes} twice")
    return delim, names


def json_keys(text: str, source: str) -> list[str]:
    """Keys of the first JSON objects in a JSON Lines sample, in first-seen order."""
    keys: list[str] = []
    seen_object = False
    for line in text.splitlines()[:200]:
        line = line.strip()
        if not line:
            continue
        try:
            obj = json.loads(line)
        except json.JSONDecodeError:
            continue
        if isinstance(obj, dict):
            seen_object = True
            keys.extend(k for k in obj if k not in keys)
    if not seen_object:
        if not text.strip():
            raise InputError(
                f"{source}:1: the file is empty; a JSON Lines log needs one object a line"
            )
        raise InputError(
            f"{source}:1: no line of the first 200 is a JSON object; is this JSON Lines?"
        )
    return keys


def map_columns(columns: list[str], overrides: dict[str, str], source: str) -> dict[str, str]:
    """Our field -> the file's column: overrides first, then the known spellings."""
    unknown = sorted(set(overrides) - set(FIELDS))
    if unknown:
        raise InputError(f"--column: unknown field(s) {unknown}; fields are {', '.join(FIELDS)}")
    mapping: dict[str, str] = {}
    for fld, col in overrides.items():
        if col not in columns:
            raise InputError(
                f"{source}: --column {fld}={col}: no such column; the file has {', '.join(columns)}"
            )
        mapping[fld] = col
    by_key = {_key(c): c for c in columns}
    for fld in FIELDS:
        if fld in mapping:
            continue
        for alias in ALIASES[fld]:
            found = by_key.get(alias)
            if found is not None and found not in mapping.values():
                mapping[fld] = found
                break
    missing = [f for f in REQUIRED if f not in mapping]
    if missing:
        raise InputError(
            f"{source}:1: no column for {' and '.join(missing)}; the file has "
            f"{', '.join(columns) or 'no columns'}; name it with --column {missing[0]}=COLUMN"
        )
    return mapping


def read_sample(path: Path, compressed: bool, size: int = 1 << 16) -> bytes:
    """The first ``size`` bytes of the (decompressed) file."""
    try:
        if compressed:
            with gzip.open(path, "rb") as fh:
                return fh.read(size)
        with path.open("rb") as fh:
            return fh.read(size)
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not a log file") from None
    except PermissionError:
        raise InputError(f"{path}: permission denied") from None
    except (OSError, EOFError, zlib.error) as exc:
        raise InputError(f"{path}: cannot read it as gzip: {exc}") from None


def sniff_log(
    path: Path,
    *,
    fmt: str | None = None,
    encoding: str | None = None,
    delimiter: str | None = None,
    overrides: dict[str, str] | None = None,
) -> LogLayout:
    """Work out how to read ``path`` from its name and first bytes."""
    form, compressed = detect_format(path, fmt)
    source = str(path)
    if form == "parquet":
        import duckdb

        try:
            rel = duckdb.sql("SELECT * FROM read_parquet(?) LIMIT 0", params=[str(path)])
        except duckdb.Error as exc:
            raise InputError(
                f"{source}: not a readable Parquet file: {str(exc).splitlines()[0]}"
            ) from None
        columns = list(rel.columns) if rel is not None else []
        return LogLayout(
            path,
            form,
            False,
            "utf-8",
            "",
            tuple(columns),
            map_columns(columns, overrides or {}, source),
        )
    enc, sample = detect_encoding(read_sample(path, compressed), encoding, source)
    text = decode_sample(sample, enc)
    first_end = text.find("\n")
    crlf = first_end > 0 and text[first_end - 1] == "\r"
    if form == "jsonl":
        columns = json_keys(text, source)
        delim = ""
    else:
        delim, columns = split_header(text, form, delimiter, source)
        if len(columns) == 1 and not delimiter:
            only = columns[0]
            raise InputError(
                f"{source}:1: the header has one column ({only[:80]!r}); if the file uses another "
                "delimiter, pass --delimiter"
            )
    return LogLayout(
        path,
        form,
        compressed,
        enc,
        delim,
        tuple(columns),
        map_columns(columns, overrides or {}, source),
        crlf,
    )
