-- querygap workspace schema, version 8: the bulk per-query and per-search tables lose their
-- primary keys.
--
-- A primary key makes DuckDB keep an ART index beside the table and probe it for every inserted
-- row: on VARCHAR keys of millions of rows that was about 6 times the insert's own cost, and the
-- index lives in memory. The stages that write these tables write each key once by construction
-- (the score stage scores only queries not yet scored against the index; a review, its clusters
-- and its members are cleared before they are written again; the session stage rebuilds its two
-- tables whole), and tests check that no key repeats. Deleting and rewriting millions of keyed
-- rows in one transaction made the session stage's commit take a minute at 2M searches.
-- Each table is rebuilt with the same columns, in the same order, keeping its rows.

CREATE TABLE query_scores_v8 (
    index_id   VARCHAR NOT NULL,
    query      VARCHAR NOT NULL,
    n_terms    INTEGER NOT NULL,   -- distinct analyzed terms
    n_known    INTEGER NOT NULL,   -- of those, terms some page contains
    best_score DOUBLE NOT NULL,    -- cosine of the best page, 0 when none
    coverage   DOUBLE NOT NULL,    -- share of the query's idf mass the best page matches
    best_doc   VARCHAR
);
INSERT INTO query_scores_v8 SELECT * FROM query_scores;
DROP TABLE query_scores;
ALTER TABLE query_scores_v8 RENAME TO query_scores;

CREATE TABLE query_top_pages_v8 (
    index_id VARCHAR NOT NULL,
    query    VARCHAR NOT NULL,
    rank     INTEGER NOT NULL,
    doc_id   VARCHAR NOT NULL,
    score    DOUBLE NOT NULL
);
INSERT INTO query_top_pages_v8 SELECT * FROM query_top_pages;
DROP TABLE query_top_pages;
ALTER TABLE query_top_pages_v8 RENAME TO query_top_pages;

CREATE TABLE query_terms_v8 (
    index_id VARCHAR NOT NULL,
    query    VARCHAR NOT NULL,
    position INTEGER NOT NULL,
    term     VARCHAR NOT NULL,
    df       INTEGER NOT NULL,
    in_best  BOOLEAN NOT NULL
);
INSERT INTO query_terms_v8 SELECT * FROM query_terms;
DROP TABLE query_terms;
ALTER TABLE query_terms_v8 RENAME TO query_terms;

CREATE TABLE review_queries_v8 (
    review_id       VARCHAR NOT NULL,
    query           VARCHAR NOT NULL,
    example         VARCHAR NOT NULL,   -- the most frequent text visitors typed for it
    searches        BIGINT NOT NULL,
    visitors        BIGINT NOT NULL,
    status          VARCHAR NOT NULL,   -- zero, low or ok
    best_score      DOUBLE NOT NULL,
    coverage        DOUBLE NOT NULL,
    best_doc        VARCHAR,
    engine_searches BIGINT NOT NULL,    -- searches whose log row says how many results were shown
    engine_empty    BIGINT NOT NULL,    -- of those, searches that showed no results
    click_searches  BIGINT NOT NULL,    -- searches whose log row says how many clicks followed
    clicked         BIGINT NOT NULL    -- of those, searches with at least one click
);
INSERT INTO review_queries_v8 SELECT * FROM review_queries;
DROP TABLE review_queries;
ALTER TABLE review_queries_v8 RENAME TO review_queries;

CREATE TABLE cluster_members_v8 (
    review_id  VARCHAR NOT NULL,
    cluster_id INTEGER NOT NULL,
    query      VARCHAR NOT NULL,
    searches   BIGINT NOT NULL,
    key_term   VARCHAR                   -- the unmatched term the query was blocked on
);
INSERT INTO cluster_members_v8 SELECT * FROM cluster_members;
DROP TABLE cluster_members;
ALTER TABLE cluster_members_v8 RENAME TO cluster_members;

CREATE TABLE search_sessions_v8 (
    file_id    INTEGER NOT NULL,
    line       BIGINT NOT NULL,
    session_id VARCHAR NOT NULL,
    is_bot     BOOLEAN NOT NULL
);
INSERT INTO search_sessions_v8 SELECT * FROM search_sessions;
DROP TABLE search_sessions;
ALTER TABLE search_sessions_v8 RENAME TO search_sessions;

CREATE TABLE session_traffic_v8 (
    session_id      VARCHAR NOT NULL,
    actor_key       VARCHAR,              -- the user key, else the session key; NULL without either
    searches        BIGINT NOT NULL,
    first_at        TIMESTAMPTZ NOT NULL,
    last_at         TIMESTAMPTZ NOT NULL,
    peak_per_minute BIGINT NOT NULL,      -- most searches in any 60 s span of the session
    peak_per_hour   BIGINT NOT NULL,      -- most searches in any 3600 s span of the session
    median_gap_s    DOUBLE,               -- median seconds between consecutive searches; NULL for one
    verdict         VARCHAR NOT NULL
);
INSERT INTO session_traffic_v8 SELECT * FROM session_traffic;
DROP TABLE session_traffic;
ALTER TABLE session_traffic_v8 RENAME TO session_traffic;
