"""Loading content: HTML/Markdown/text parsing, boilerplate removal, reloads, bad files."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from querygap.errors import InputError
from querygap.pageload import ContentOptions, load_content
from querygap.pagetext import parse_html, parse_markdown

NAV = "<nav><a href='/'>Home</a> <a href='/bills'>Bills</a></nav>"
FOOT = "<footer><p>Kestrel Valley Water Ltd, registered office: 1 River Row.</p></footer>"


def page(title: str, body: str, extra: str = "") -> str:
    return (
        f"<!doctype html><html><head><title>{title} | Kestrel Valley Water</title></head>"
        f"<body><header>{NAV}</header><main><h1>{title}</h1>{body}"
        "<p>Was this page helpful?</p></main>"
        f"<div class='share'><p>Share this page with a friend</p></div>{extra}{FOOT}"
        "<script>track()</script></body></html>"
    )


def make_site(root: Path, n: int = 6) -> Path:
    (root / "bills").mkdir(parents=True)
    for i in range(n):
        (root / "bills" / f"p{i}.html").write_text(
            page(
                f"Topic {i}", f"<p>Paragraph about topic{i} and <b>bills</b>.</p><h2>More {i}</h2>"
            ),
            encoding="utf-8",
        )
    return root


def test_html_parser_drops_scripts_nav_and_keeps_headings() -> None:
    parsed = parse_html(
        page("Pay a bill", "<p>Pay <i>online</i>.</p><h2>By post</h2><p>Cheque.</p>")
    )
    assert parsed.title == "Pay a bill | Kestrel Valley Water"
    assert parsed.headings == ("Pay a bill", "By post")
    assert "Pay online." in parsed.blocks and not any("track" in b for b in parsed.blocks)
    assert not any("Home" in b for b in parsed.blocks)


def test_markdown_parser() -> None:
    parsed = parse_markdown(
        "---\ntitle: Leaks\n---\n# Leak help\n\nSee [the form](/f) *now*.\n\n"
        "## Outside\n- pipes\n- drains\n"
    )
    assert parsed.title == "Leaks"
    assert parsed.headings == ("Leak help", "Outside")
    assert "See the form now." in parsed.blocks and "pipes" in parsed.blocks


def test_boilerplate_and_title_suffix_removed(conn, tmp_path) -> None:
    result = load_content(conn, make_site(tmp_path / "site"), ContentOptions(source="site"))
    assert (result.read, result.added, result.rejected) == (6, 6, 0)
    rows = conn.execute("SELECT title, body FROM documents ORDER BY doc_id").fetchall()
    assert rows[0][0] == "Topic 0"
    assert all("Share this page" not in body and "helpful" not in body for _, body in rows)
    assert conn.execute("SELECT count(*) FROM boilerplate").fetchall()[0][0] >= 1


def test_reload_skips_unchanged_and_marks_gone(conn, tmp_path) -> None:
    site = make_site(tmp_path / "site")
    load_content(conn, site, ContentOptions(source="site"))
    (site / "bills" / "p0.html").unlink()
    (site / "bills" / "p1.html").write_text(
        page("Topic 1", "<p>New words entirely.</p>"), encoding="utf-8"
    )
    result = load_content(conn, site, ContentOptions(source="site"))
    assert (result.added, result.changed, result.unchanged, result.gone) == (0, 1, 4, 1)
    status = dict(conn.execute("SELECT doc_id, status FROM documents").fetchall())
    assert status["site:bills/p0.html"] == "gone"


@pytest.mark.parametrize("in_workers", [False, True])
def test_bad_files_are_listed_not_lost(conn, tmp_path, monkeypatch, in_workers: bool) -> None:
    from querygap import pagetext

    if in_workers:  # the files are read and parsed in worker processes
        monkeypatch.setattr(pagetext, "PARALLEL_BODIES", 1)
    site = make_site(tmp_path / "site")
    (site / "logo.png").write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00")
    (site / "blob.html").write_bytes(b"<html>\x00\x00\x00binary")
    (site / "empty.html").write_text("", encoding="utf-8")
    (site / "navonly.html").write_text(f"<html><body>{NAV}{FOOT}</body></html>", encoding="utf-8")
    os.symlink(site, site / "loop")
    result = load_content(conn, site, ContentOptions(source="site"))
    reasons = dict(conn.execute("SELECT path, reason FROM page_rejects").fetchall())
    assert reasons["logo.png"].startswith("not a page")
    assert reasons["blob.html"] == "binary file (has NUL bytes)"
    assert "no text left" in reasons["empty.html"] and "no text left" in reasons["navonly.html"]
    assert reasons["loop"] == "symlinked folder, not followed"
    assert result.read == result.added + result.changed + result.unchanged + result.rejected
    assert result.added == 6
    assert conn.execute("SELECT count(*) FROM documents WHERE title LIKE 'Topic %'").fetchall() == [
        (6,)
    ]


def test_export_csv(conn, tmp_path) -> None:
    path = tmp_path / "pages.csv"
    path.write_text(
        'id,title,body,url\n1,Leaks,"<p>Report a <b>leak</b></p>",https://x.example/1\n'
        "2,Bills,Pay your bill,\n",
        encoding="utf-8",
    )
    result = load_content(conn, path, ContentOptions())
    assert result.added == 2
    body = conn.execute("SELECT body FROM documents WHERE title = 'Leaks'").fetchall()[0][0]
    assert body == "Report a leak"


def test_export_missing_columns(conn, tmp_path) -> None:
    path = tmp_path / "pages.csv"
    path.write_text("id,name\n1,x\n", encoding="utf-8")
    with pytest.raises(
        InputError, match="pages.csv:1: a content export needs columns id, title and body"
    ):
        load_content(conn, path, ContentOptions())


def test_squeezed_spacing_equals_the_regular_expression() -> None:
    # Reference: Python's re, one " " for every run of the spacing characters; line breaks and
    # other white space (U+2028, U+0085) are not in the set and stay.
    import random
    import re

    from querygap.pagetext import _squeeze

    spacing = re.compile(r"[ \t\r\f\v\u00a0\u200b]+")
    rnd = random.Random(5)
    alphabet = [" ", "\t", "\r", "\f", "\v", "\u00a0", "\u200b", "\n", "\u2028", "\x85", "a", "é"]
    texts = ["".join(rnd.choices(alphabet, k=rnd.randint(0, 40))) for _ in range(5000)]
    texts += ["", " ", "a" + " " * 33 + "b", "\u200b\u200b", "x \t\u00a0 y"]
    assert [_squeeze(t) for t in texts] == [spacing.sub(" ", t) for t in texts]


def test_bodies_parsed_in_helper_processes_equal_those_parsed_here(monkeypatch) -> None:
    from querygap import pagetext

    texts = [
        f"<html><head><title>Page {i}</title></head><body><nav>menu</nav><h2>Part {i}</h2>"
        f"<p>text {i} &amp; more</p></body></html>"
        if i % 3
        else f"plain page {i}\n\nsecond paragraph"
        for i in range(23)
    ]
    monkeypatch.setattr(pagetext, "PARALLEL_BODIES", 10)
    shared = pagetext.parse_bodies(texts, workers=3)  # this process and two helpers, in order
    assert shared == [pagetext.parse_body(t) for t in texts]
    assert shared[4].title == "Page 4" and shared[4].headings == ("Part 4",)
    assert shared[21].title == "plain page 21"


def test_a_failing_helper_process_has_its_share_parsed_here(monkeypatch) -> None:
    import sys

    from querygap import pagetext

    texts = [f"<p>page {i}</p>" for i in range(12)]
    monkeypatch.setattr(pagetext, "PARALLEL_BODIES", 10)
    monkeypatch.setattr(sys, "executable", "/bin/false")  # the helper exits at once, status 1
    with pytest.warns(RuntimeWarning, match="helper process failed"):
        shared = pagetext.parse_bodies(texts, workers=2)
    assert shared == [pagetext.parse_body(t) for t in texts]
