"""The load stage for content: a folder of pages, or a CMS export, -> ``documents``.

Pages are parsed into blocks (:mod:`querygap.pagetext`); a block found on at least
``boilerplate_share`` of a source's pages (and on at least 3) is navigation or footer text and is
removed, because such text would inflate every page's length and flatten document frequencies.
A title part repeated across most pages (``"... | Site name"``) is removed for the same reason.
Reloading a source updates changed pages, keeps unchanged ones and marks missing ones as gone.
"""

from __future__ import annotations

import hashlib
import os
import re
from collections import Counter
from dataclasses import dataclass
from functools import partial
from pathlib import Path

import duckdb
import pandas as pd

from querygap.errors import InputError
from querygap.pagetext import (
    ParsedPage,
    decode_page,
    in_processes,
    parse_bodies,
    parse_html,
    parse_markdown,
    parse_plain,
)
from querygap.workspace import run, transaction

PAGE_SUFFIXES = {
    ".html": "html",
    ".htm": "html",
    ".md": "markdown",
    ".markdown": "markdown",
    ".txt": "text",
}
EXPORT_SUFFIXES = (".csv", ".jsonl", ".ndjson", ".parquet")
_TITLE_SEP = re.compile(r"\s+[|\u2013\u2014·:-]\s+")


@dataclass(frozen=True)
class ContentOptions:
    """How to read a content source."""

    source: str | None = None  # name of the source; default: the folder or file name
    base_url: str = ""  # prefix for page URLs made from relative paths
    boilerplate_share: float = 0.5  # a block on this share of pages (and >= 3) is boilerplate
    max_page_bytes: int = 20 << 20


@dataclass(frozen=True)
class ContentResult:
    source: str
    read: int
    added: int
    changed: int
    unchanged: int
    gone: int
    rejected: int
    boilerplate_blocks: int

    def summary(self) -> str:
        return (
            f"{self.source}: {self.read:,} read = {self.added:,} new + {self.changed:,} changed + "
            f"{self.unchanged:,} unchanged + {self.rejected:,} not loaded; {self.gone:,} gone; "
            f"{self.boilerplate_blocks:,} boilerplate blocks removed"
        )


def walk_pages(root: Path) -> tuple[list[Path], list[tuple[str, str]]]:
    """Page files below ``root`` (symlinked folders are not followed, so loops cannot happen)."""
    pages: list[Path] = []
    skipped: list[tuple[str, str]] = []
    for folder, dirs, files in os.walk(root, followlinks=False):
        base = Path(folder)
        for d in list(dirs):
            if (base / d).is_symlink():
                skipped.append(
                    (str((base / d).relative_to(root)), "symlinked folder, not followed")
                )
        dirs[:] = sorted(d for d in dirs if not d.startswith(".") and not (base / d).is_symlink())
        for name in sorted(files):
            path = base / name
            rel = str(path.relative_to(root))
            if name.startswith("."):
                continue
            if path.suffix.lower() not in PAGE_SUFFIXES:
                skipped.append(
                    (
                        rel,
                        f"not a page ({path.suffix or 'no suffix'}); pages are "
                        ".html, .htm, .md, .markdown or .txt",
                    )
                )
                continue
            pages.append(path)
    return pages, skipped


def parse_file(path: Path, max_bytes: int) -> ParsedPage | str:
    """A parsed page, or the reason it cannot be one."""
    try:
        if path.stat().st_size > max_bytes:
            return f"larger than {max_bytes >> 20} MiB"
        data = path.read_bytes()
    except OSError as exc:
        return f"cannot be read: {exc.strerror or exc}"
    if b"\x00" in data[:8192] and not data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return "binary file (has NUL bytes)"
    text = decode_page(data)
    kind = PAGE_SUFFIXES[path.suffix.lower()]
    if kind == "html":
        return parse_html(text)
    if kind == "markdown":
        return parse_markdown(text)
    return parse_plain(text)


def read_export(path: Path) -> pd.DataFrame:
    """A CMS export (CSV, JSON Lines or Parquet) with columns id, title, body and optional url."""
    reader = {
        ".csv": "read_csv(?, all_varchar = true, header = true)",
        ".jsonl": "read_json(?, format = 'newline_delimited')",
        ".ndjson": "read_json(?, format = 'newline_delimited')",
        ".parquet": "read_parquet(?)",
    }[path.suffix.lower()]
    try:
        frame = duckdb.execute(f"SELECT * FROM {reader}", [str(path)]).df()
    except duckdb.Error as exc:
        raise InputError(f"{path}: cannot be read: {str(exc).splitlines()[0]}") from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    missing = [c for c in ("id", "title", "body") if c not in frame.columns]
    if missing:
        raise InputError(
            f"{path}:1: a content export needs columns id, title and body (url optional); "
            f"missing {', '.join(missing)}; found {', '.join(frame.columns)}"
        )
    return frame


def strip_title_boilerplate(titles: list[str], share: float) -> list[str]:
    """Drop a leading or trailing title part (split at `` | `` or `` - ``) common to most pages."""
    parts = [_TITLE_SEP.split(t) if t else [] for t in titles]
    need = max(3, share * len(titles))
    tails = Counter(p[-1].casefold() for p in parts if len(p) > 1)
    heads = Counter(p[0].casefold() for p in parts if len(p) > 1)
    out = []
    for title, p in zip(titles, parts, strict=True):
        if len(p) > 1 and tails[p[-1].casefold()] >= need:
            p = p[:-1]
        elif len(p) > 1 and heads[p[0].casefold()] >= need:
            p = p[1:]
        out.append(" | ".join(p) if len(p) > 1 else (p[0] if p else title))
    return out


def find_boilerplate(pages: list[ParsedPage], share: float) -> dict[str, int]:
    """Blocks (compared case-folded) that stand on at least ``share`` of pages and on 3 or more."""
    counts: Counter[str] = Counter()
    for page in pages:
        counts.update({b.casefold() for b in page.blocks})
    need = max(3.0, share * len(pages))
    return {b: n for b, n in counts.items() if n >= need}


def build_records(
    ids: list[str], urls: list[str], pages: list[ParsedPage], source: str, share: float
) -> tuple[pd.DataFrame, dict[str, int], list[int]]:
    """Page records without boilerplate; also the boilerplate and the empty pages' positions."""
    boiler = find_boilerplate(pages, share)
    titles = strip_title_boilerplate([p.title for p in pages], share)
    rows, empty = [], []
    for i, (doc, url, page, title) in enumerate(zip(ids, urls, pages, titles, strict=True)):
        blocks = [b for b in page.blocks if b.casefold() not in boiler]
        headings = [h for h in page.headings if h.casefold() not in boiler]
        body = "\n".join(blocks)
        if not body.strip() and not title.strip():
            empty.append(i)
            continue
        digest = hashlib.sha256("\x1f".join([title, *headings, body]).encode()).hexdigest()
        rows.append((doc, source, url, title, "\n".join(headings), body, digest))
    frame = pd.DataFrame(
        rows, columns=["doc_id", "source", "url", "title", "headings", "body", "content_hash"]
    )
    return frame, boiler, empty


def load_content(
    conn: duckdb.DuckDBPyConnection, path: Path, options: ContentOptions
) -> ContentResult:
    """Load a content folder or export file as one source (one transaction)."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file or folder")
    source = options.source or path.resolve().name
    rejects: list[tuple[str, str]] = []
    if path.is_dir():
        files, rejects = walk_pages(path)
        read = len(files) + len(rejects)
        ids, urls, pages = [], [], []
        every = in_processes(partial(parse_file, max_bytes=options.max_page_bytes), files)
        for f, parsed in zip(files, every, strict=True):
            rel = f.relative_to(path).as_posix()
            if isinstance(parsed, str):
                rejects.append((rel, parsed))
                continue
            ids.append(f"{source}:{rel}")
            urls.append(options.base_url + rel)
            pages.append(parsed)
    elif path.suffix.lower() in EXPORT_SUFFIXES:
        frame = read_export(path)
        read = len(frame)
        ids, urls, titles, bodies = [], [], [], []
        seen: set[str] = set()
        for line, row in enumerate(frame.itertuples(index=False), start=2):
            doc = str(row.id or "").strip()
            if not doc or doc in seen:
                rejects.append(
                    (f"{path.name}:{line}", "id is empty" if not doc else f"id {doc} repeats")
                )
                continue
            seen.add(doc)
            bodies.append(str(row.body or ""))
            titles.append(str(row.title or "").strip())
            ids.append(f"{source}:{doc}")
            url = getattr(row, "url", None) if "url" in frame.columns else None
            urls.append(str(url) if url else options.base_url + doc)
        pages = [
            ParsedPage(title or body.title, body.headings, body.blocks)
            for title, body in zip(titles, parse_bodies(bodies), strict=True)
        ]
    else:
        raise InputError(
            f"{path}: content is a folder of pages or an export file ({', '.join(EXPORT_SUFFIXES)})"
        )
    records, boiler, empty = build_records(ids, urls, pages, source, options.boilerplate_share)
    for i in empty:
        rejects.append(
            (ids[i].split(":", 1)[1], "no text left after removing navigation and boilerplate")
        )
    with transaction(conn):
        conn.register("stage_pages_df", records)
        conn.execute("CREATE OR REPLACE TEMP TABLE stage_pages AS SELECT * FROM stage_pages_df")
        conn.unregister("stage_pages_df")
        added, changed, unchanged, gone = run(
            conn, "content_changes", {"source": source}
        ).fetchall()[0]
        run(conn, "content_upsert")
        run(conn, "content_mark_gone", {"source": source})
        run(conn, "content_replace_boilerplate", {"source": source})
        if boiler:
            conn.executemany(
                "INSERT INTO boilerplate VALUES (?, ?, ?)",
                [(source, b[:500], n) for b, n in sorted(boiler.items())],
            )
        if rejects:
            conn.executemany(
                "INSERT INTO page_rejects VALUES (?, ?, ?, now())",
                [(source, p, r) for p, r in rejects],
            )
        run(
            conn,
            "content_record_load",
            {
                "source": source,
                "read": read,
                "added": added,
                "changed": changed,
                "unchanged": unchanged,
                "gone": gone,
                "rejected": len(rejects),
            },
        )
        conn.execute("DROP TABLE stage_pages")
    return ContentResult(
        source, read, int(added), int(changed), int(unchanged), int(gone), len(rejects), len(boiler)
    )
