-- querygap workspace schema, version 1: the tables of the load, index, score and flag stages.
-- Every table is keyed so that rerunning a stage replaces its rows instead of adding more.

CREATE TABLE schema_version (
    version    INTEGER PRIMARY KEY,
    script     VARCHAR NOT NULL,
    applied_at TIMESTAMPTZ NOT NULL
);

-- The secret behind the keyed hashes of session and user keys (HMAC-SHA256). It never leaves the
-- workspace; delete the workspace to make old keys unlinkable.
CREATE TABLE workspace_secret (
    secret BLOB NOT NULL
);

-- One row per log file loaded; sha256 makes a second load of the same bytes a no-op.
CREATE TABLE log_files (
    file_id        INTEGER PRIMARY KEY,
    path           VARCHAR NOT NULL,
    sha256         VARCHAR NOT NULL UNIQUE,
    format         VARCHAR NOT NULL,
    columns_used   VARCHAR NOT NULL,   -- JSON: our field -> the file's column
    time_zone      VARCHAR NOT NULL,   -- applied to timestamps without an offset
    redacted       BOOLEAN NOT NULL,
    rows_read      BIGINT NOT NULL,
    rows_loaded    BIGINT NOT NULL,
    rows_rejected  BIGINT NOT NULL,
    rows_duplicate BIGINT NOT NULL,
    loaded_at      TIMESTAMPTZ NOT NULL
);

-- One row per search. query_text is the visitor's text after redaction; query its normalized form,
-- which groups searches. fingerprint + occurrence recognise the same search in overlapping exports.
CREATE TABLE searches (
    file_id     INTEGER NOT NULL,
    line        BIGINT NOT NULL,       -- record number in the file (1 = header line, if any)
    searched_at TIMESTAMPTZ NOT NULL,
    query_text  VARCHAR NOT NULL,
    query       VARCHAR NOT NULL,
    session_key VARCHAR,               -- keyed hash of the log's session id
    user_key    VARCHAR,               -- keyed hash of the log's user or client key
    results     BIGINT,                -- results the engine showed, where the log says
    clicks      BIGINT,                -- clicks on those results, where the log says
    fingerprint UBIGINT NOT NULL,
    occurrence  INTEGER NOT NULL,
    PRIMARY KEY (file_id, line)
);

-- Rows that could not be loaded, with the reason. raw is the row's text, redacted.
CREATE TABLE rejects (
    file_id INTEGER NOT NULL,
    line    BIGINT,
    field   VARCHAR,
    reason  VARCHAR NOT NULL,
    raw     VARCHAR
);

-- How many items of each kind of personal data redaction replaced, per file.
CREATE TABLE redactions (
    file_id INTEGER NOT NULL,
    kind    VARCHAR NOT NULL,
    items   BIGINT NOT NULL,
    PRIMARY KEY (file_id, kind)
);

-- Content pages. status is 'present' or 'gone' (seen before, missing from the latest load).
CREATE TABLE documents (
    doc_id       VARCHAR PRIMARY KEY,
    source       VARCHAR NOT NULL,
    url          VARCHAR,
    title        VARCHAR NOT NULL,
    headings     VARCHAR NOT NULL,
    body         VARCHAR NOT NULL,
    content_hash VARCHAR NOT NULL,
    status       VARCHAR NOT NULL,
    first_seen   TIMESTAMPTZ NOT NULL,
    last_seen    TIMESTAMPTZ NOT NULL
);

-- Text blocks found on so many pages of a source that they were removed as boilerplate.
CREATE TABLE boilerplate (
    source VARCHAR NOT NULL,
    block  VARCHAR NOT NULL,
    pages  INTEGER NOT NULL
);

-- One row per content load: what happened to the pages.
CREATE TABLE content_loads (
    source    VARCHAR NOT NULL,
    loaded_at TIMESTAMPTZ NOT NULL,
    read      INTEGER NOT NULL,
    added     INTEGER NOT NULL,
    changed   INTEGER NOT NULL,
    unchanged INTEGER NOT NULL,
    gone      INTEGER NOT NULL,
    rejected  INTEGER NOT NULL
);

-- Files of a content source that were not loaded, and why.
CREATE TABLE page_rejects (
    source    VARCHAR NOT NULL,
    path      VARCHAR NOT NULL,
    reason    VARCHAR NOT NULL,
    loaded_at TIMESTAMPTZ NOT NULL
);

-- One row per index built. index_id is a fingerprint of the settings and of every page's hash, so
-- an unchanged collection reuses its index (and the scores made against it).
CREATE TABLE indexes (
    index_id   VARCHAR PRIMARY KEY,
    settings   VARCHAR NOT NULL,   -- JSON
    n_docs     INTEGER NOT NULL,
    n_terms    INTEGER NOT NULL,
    created_at TIMESTAMPTZ NOT NULL,
    current    BOOLEAN NOT NULL
);

CREATE TABLE terms (
    index_id VARCHAR NOT NULL,
    term_id  INTEGER NOT NULL,
    term     VARCHAR NOT NULL,
    df       INTEGER NOT NULL,
    cf       DOUBLE NOT NULL,      -- field-weighted collection frequency
    idf      DOUBLE NOT NULL,
    PRIMARY KEY (index_id, term_id)
);

CREATE TABLE doc_rows (
    index_id VARCHAR NOT NULL,
    doc_row  INTEGER NOT NULL,
    doc_id   VARCHAR NOT NULL,
    length   DOUBLE NOT NULL,      -- field-weighted term count
    PRIMARY KEY (index_id, doc_row)
);

-- The unit-length page vectors, one row per non-zero entry.
CREATE TABLE doc_terms (
    index_id VARCHAR NOT NULL,
    doc_row  INTEGER NOT NULL,
    term_id  INTEGER NOT NULL,
    count    DOUBLE NOT NULL,
    weight   DOUBLE NOT NULL
);

-- Scores of unique normalized queries against one index.
CREATE TABLE query_scores (
    index_id   VARCHAR NOT NULL,
    query      VARCHAR NOT NULL,
    n_terms    INTEGER NOT NULL,   -- distinct analyzed terms
    n_known    INTEGER NOT NULL,   -- of those, terms some page contains
    best_score DOUBLE NOT NULL,    -- cosine of the best page, 0 when none
    coverage   DOUBLE NOT NULL,    -- share of the query's idf mass the best page matches
    best_doc   VARCHAR,
    PRIMARY KEY (index_id, query)
);

CREATE TABLE query_top_pages (
    index_id VARCHAR NOT NULL,
    query    VARCHAR NOT NULL,
    rank     INTEGER NOT NULL,
    doc_id   VARCHAR NOT NULL,
    score    DOUBLE NOT NULL,
    PRIMARY KEY (index_id, query, rank)
);

-- Each distinct term of each query: whether any page has it (df > 0) and whether the best page does.
CREATE TABLE query_terms (
    index_id VARCHAR NOT NULL,
    query    VARCHAR NOT NULL,
    position INTEGER NOT NULL,
    term     VARCHAR NOT NULL,
    df       INTEGER NOT NULL,
    in_best  BOOLEAN NOT NULL,
    PRIMARY KEY (index_id, query, position)
);

-- One row per review: a time window scored against an index, with the thresholds used.
CREATE TABLE reviews (
    review_id    VARCHAR PRIMARY KEY,
    window_start TIMESTAMPTZ NOT NULL,
    window_end   TIMESTAMPTZ NOT NULL,   -- exclusive
    index_id     VARCHAR NOT NULL,
    settings     VARCHAR NOT NULL,       -- JSON
    created_at   TIMESTAMPTZ NOT NULL
);

-- Every unique query of a review window with its volume, content score and status.
CREATE TABLE review_queries (
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
    clicked         BIGINT NOT NULL,    -- of those, searches with at least one click
    PRIMARY KEY (review_id, query)
);

-- Rows of a file that an earlier file already held (overlapping exports): kept for the record,
-- not counted twice.
CREATE TABLE duplicates (
    file_id    INTEGER NOT NULL,
    line       BIGINT NOT NULL,
    of_file_id INTEGER NOT NULL,
    of_line    BIGINT NOT NULL
);
