-- searches without its PRIMARY KEY (file_id, line). DuckDB keeps a primary key in an ART index
-- that every insert updates: storing 2M rows took 5.7 s with it and 0.2 s without, and the index
-- held memory beyond the workspace's memory_limit. No statement looks a search up by that key
-- (joins on it are hash joins), and (file_id, line) stays unique by construction: each load takes
-- a new file_id and stores each record of its file at most once (tests/test_logload.py checks it).
CREATE TABLE searches_unkeyed (
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
    occurrence  INTEGER NOT NULL
);
INSERT INTO searches_unkeyed SELECT * FROM searches ORDER BY file_id, line;
DROP TABLE searches;
ALTER TABLE searches_unkeyed RENAME TO searches;
