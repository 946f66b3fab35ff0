"""Pure parsers that turn one content page into a title, headings and text blocks.

A *block* is a paragraph-like unit (a paragraph, list item, table cell, heading...). Blocks let the
content loader find boilerplate: a block repeated on most pages of a site is navigation or footer,
not content. HTML goes through the Lexbor parser (``selectolax``): scripts, styles, ``<nav>``,
``<footer>``, the page-level ``<header>``, ``<aside>`` and navigation landmark roles are
dropped; ``<main>`` (or ``role=main``) is used when the page has one.
"""

from __future__ import annotations

import os
import pickle
import re
import subprocess
import sys
import tempfile
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TypeVar

import numpy as np
from selectolax.lexbor import LexborHTMLParser

T = TypeVar("T")
R = TypeVar("R")

_DROP = (
    "script, style, noscript, template, svg, canvas, iframe, object, nav, footer, aside, form, "
    "body > header, [role=navigation], [role=banner], [role=contentinfo], [role=search], "
    "[aria-hidden=true], [hidden]"
)
_BLOCKS = (
    "address, article, blockquote, caption, dd, details, dialog, div, dl, dt, fieldset, "
    "figcaption, figure, h1, h2, h3, h4, h5, h6, hr, li, main, ol, p, pre, section, summary, "
    "table, tbody, td, tfoot, th, thead, tr, ul, br"
)
_HEADINGS = "h1, h2, h3, h4, h5, h6"
#: Spaces other than " " that a run of spacing may hold (a line break is kept: it ends a block).
_ODD_SPACES = "\t\r\f\v\u00a0\u200b"
_TO_SPACE = str.maketrans(dict.fromkeys(_ODD_SPACES, " "))


@dataclass(frozen=True)
class ParsedPage:
    """One page's text, split for indexing and boilerplate detection."""

    title: str
    headings: tuple[str, ...]
    blocks: tuple[str, ...]  # body text blocks in reading order (headings included)


def _squeeze(text: str) -> str:
    """Every run of spaces, tabs, no-break and zero-width spaces as one " " (line breaks kept).

    The same as ``re.sub(r"[ \t\r\f\v\u00a0\u200b]+", " ", text)``, which costs 40 us for a
    page of 1 kB because every single space is a match; translating and halving the double
    spaces takes 2 us.
    """
    if any(c in text for c in _ODD_SPACES):
        text = text.translate(_TO_SPACE)
    while "  " in text:
        text = text.replace("  ", " ")
    return text


def _clean(text: str) -> str:
    return _squeeze(text).strip()


def _split_blocks(text: str) -> tuple[str, ...]:
    # _squeeze keeps line breaks, so one pass over the whole text cleans every line.
    return tuple(b for b in (line.strip() for line in _squeeze(text).split("\n")) if b)


def parse_html(html: str) -> ParsedPage:
    """Title, headings and blocks of an HTML page or fragment."""
    tree = LexborHTMLParser(html)
    title_node = tree.css_first("title")
    title = _clean(title_node.text()) if title_node else ""
    for node in tree.css(_DROP):
        node.decompose()
    root = tree.css_first("main, [role=main]") or tree.body or tree.root
    if root is None:
        return ParsedPage(title, (), ())
    headings = tuple(h for h in (_clean(n.text(separator=" ")) for n in root.css(_HEADINGS)) if h)
    for node in root.css(_BLOCKS):
        node.insert_before("\n")
        node.insert_after("\n")
    blocks = _split_blocks(root.text(separator=""))
    if not title and headings:
        title = headings[0]
    return ParsedPage(title, headings, blocks)


_MD_FRONT = re.compile(r"\A---\s*\n(.*?)\n---\s*\n", re.S)
_MD_HEADING = re.compile(r"^\s{0,3}(#{1,6})\s+(.*?)\s*#*\s*$")
_MD_INLINE = [
    (re.compile(r"!\[([^\]]*)\]\([^)]*\)"), r"\1"),  # images -> alt text
    (re.compile(r"\[([^\]]*)\]\([^)]*\)"), r"\1"),  # links -> link text
    (re.compile(r"<[^>]+>"), " "),  # inline HTML tags
    (re.compile(r"`([^`]*)`"), r"\1"),  # code spans
    (re.compile(r"(\*\*|__|\*|_|~~)(?=\S)(.+?)(?<=\S)\1"), r"\2"),  # emphasis
]
_MD_LINE_MARK = re.compile(r"^\s*(?:[-*+]\s+|\d+[.)]\s+|>\s?|\|)")


def _md_inline(text: str) -> str:
    for pattern, repl in _MD_INLINE:
        text = pattern.sub(repl, text)
    return _clean(text.replace("|", " "))


def parse_markdown(text: str) -> ParsedPage:
    """Title (front matter ``title:`` or the first heading), headings and paragraph blocks."""
    title = ""
    front = _MD_FRONT.match(text)
    if front:
        for line in front.group(1).splitlines():
            if line.lower().startswith("title:"):
                title = line.split(":", 1)[1].strip().strip("'\"")
        text = text[front.end() :]
    headings: list[str] = []
    blocks: list[str] = []
    para: list[str] = []
    in_code = False

    def flush() -> None:
        if para:
            block = _md_inline(" ".join(para))
            if block:
                blocks.append(block)
            para.clear()

    for line in text.splitlines():
        if line.strip().startswith(("```", "~~~")):
            in_code = not in_code
            flush()
            continue
        heading = None if in_code else _MD_HEADING.match(line)
        if heading:
            flush()
            head = _md_inline(heading.group(2))
            if head:
                headings.append(head)
                blocks.append(head)
        elif not line.strip() or re.fullmatch(r"\s*([-*_=]\s*){3,}", line):
            flush()
        elif _MD_LINE_MARK.match(line) and not in_code:
            flush()
            para.append(_MD_LINE_MARK.sub("", line))
        else:
            para.append(line)
    flush()
    if not title and headings:
        title = headings[0]
    return ParsedPage(title, tuple(headings), tuple(blocks))


def parse_plain(text: str) -> ParsedPage:
    """Plain text: the first non-empty line is the title; blank lines separate blocks."""
    blocks = tuple(
        b for b in (_clean(p.replace("\n", " ")) for p in re.split(r"\n\s*\n", text)) if b
    )
    first = next((ln.strip() for ln in text.splitlines() if ln.strip()), "")
    return ParsedPage(_clean(first), (), blocks)


_TAG = re.compile(r"<(p|div|br|h[1-6]|li|ul|span|a|b|i|em|strong|table|html|body)\b", re.I)


def parse_body(text: str) -> ParsedPage:
    """A body from a CMS export: HTML when it has HTML tags, else plain paragraphs."""
    return parse_html(text) if _TAG.search(text) else parse_plain(text)


#: Below this many items they are all parsed here: a helper process costs about 0.3 s to start.
PARALLEL_BODIES = 5000


def in_processes(func: Callable[[T], R], items: list[T], workers: int | None = None) -> list[R]:
    """``[func(x) for x in items]``, shared with ``workers - 1`` helper processes (default: one
    worker per core, this process included) when there are ``PARALLEL_BODIES`` items or more.

    The HTML parser holds the GIL, so threads would not help. Each helper is a fresh interpreter
    (``python -m querygap.page_worker``) that reads its share and ``func`` pickled from a file of
    a private temporary folder and writes its results next to it; files, not pipes, so no
    helper waits for this busy process to read. Nothing is forked from this process (which may
    hold DuckDB's threads) and the caller's script is never imported again. ``func`` must be
    picklable (a module-level function or a partial of one). A helper that fails has its share
    done here instead, with a warning. At 100k pages on 2 cores: 8.4 s -> 5 s.
    """
    workers = min(workers or os.cpu_count() or 1, 8)
    if workers < 2 or len(items) < PARALLEL_BODIES:
        return [func(x) for x in items]
    bounds = np.linspace(0, len(items), workers + 1).astype(int)
    shares = [items[lo:hi] for lo, hi in zip(bounds[:-1], bounds[1:], strict=True)]
    with tempfile.TemporaryDirectory(prefix="querygap-pages-") as tmp:
        helpers = []
        for n, share in enumerate(shares[1:], start=1):
            source, target = Path(tmp) / f"{n}.in", Path(tmp) / f"{n}.out"
            source.write_bytes(pickle.dumps((func, share), pickle.HIGHEST_PROTOCOL))
            command = [sys.executable, "-m", "querygap.page_worker", str(source), str(target)]
            helpers.append(
                (
                    subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE),
                    target,
                )
            )
        done = [[func(x) for x in shares[0]]]
        for (proc, target), share in zip(helpers, shares[1:], strict=True):
            _, err = proc.communicate()
            if proc.returncode == 0 and target.is_file():
                done.append(pickle.loads(target.read_bytes()))
                continue
            last = err.decode(errors="replace").strip().splitlines()[-1:] or ["no message"]
            warnings.warn(
                f"a page-parsing helper process failed ({last[0]}); parsing its share here",
                RuntimeWarning,
                stacklevel=2,
            )
            done.append([func(x) for x in share])
    return [out for part in done for out in part]


def parse_bodies(texts: list[str], workers: int | None = None) -> list[ParsedPage]:
    """:func:`parse_body` of each text, in order, in worker processes when there are many
    (:func:`in_processes`)."""
    return in_processes(parse_body, texts, workers)


def decode_page(data: bytes) -> str:
    """Page bytes to text: UTF-8 (BOM allowed), else the declared charset, else Windows-1252."""
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return data.decode("utf-16", errors="replace")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        pass
    declared = re.search(rb"charset=[\"']?([A-Za-z0-9_\-]+)", data[:4096])
    if declared:
        try:
            return data.decode(declared.group(1).decode("ascii"), errors="replace")
        except LookupError:
            pass
    return data.decode("cp1252", errors="replace")
