-- querygap workspace schema, version 10: searches keep their visitor keys as 64-bit integers.
--
-- A session or user key is a keyed hash (HMAC-SHA256, its first 64 bits, sql/load.sql
-- stage_key_map). Until version 9 it was stored as 16 hex digits; a 16-character string is too
-- long for DuckDB to keep inline, so every join, distinct count and write on it followed a
-- pointer and compressed a string. As UBIGINT the same 64 bits store 20M searches in 14 s
-- instead of 24 s and count distinct visitors per query in 5.5 s instead of 7.4 s (size M
-- benchmark, tests/benchmarks). Where a key is shown (session ids, session_traffic.actor_key)
-- it is printed as the same 16 hex digits, printf('%016x', key), so nothing visible changes.
-- A stored key that is not 16 hex digits (only hand-made data has one) keeps DuckDB's 64-bit
-- hash of its text.
CREATE TABLE searches_int_keys (
    file_id     INTEGER NOT NULL,
    line        BIGINT NOT NULL,       -- record number in the file (1 = header line, if any)
    searched_at TIMESTAMPTZ NOT NULL,
    query_text  VARCHAR NOT NULL,
    query       VARCHAR NOT NULL,
    session_key UBIGINT,               -- keyed hash of the log's session id (64 bits)
    user_key    UBIGINT,               -- keyed hash of the log's user or client key (64 bits)
    results     BIGINT,                -- results the engine showed, where the log says
    clicks      BIGINT,                -- clicks on those results, where the log says
    fingerprint UBIGINT NOT NULL,
    occurrence  INTEGER NOT NULL
);
INSERT INTO searches_int_keys
SELECT * REPLACE (
    CASE WHEN regexp_full_match(session_key, '[0-9a-f]{16}') THEN ('0x' || session_key)::UBIGINT
         WHEN session_key IS NOT NULL THEN hash(session_key) END AS session_key,
    CASE WHEN regexp_full_match(user_key, '[0-9a-f]{16}') THEN ('0x' || user_key)::UBIGINT
         WHEN user_key IS NOT NULL THEN hash(user_key) END AS user_key
)
FROM searches ORDER BY file_id, line;
DROP TABLE searches;
ALTER TABLE searches_int_keys RENAME TO searches;
