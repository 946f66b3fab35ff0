-- querygap workspace schema, version 13: a session's name and actor key are computed, not stored.
--
-- session_traffic held session_id ('s:<key>', 'u:<key>:<n>', 'r:<file>:<line>') and actor_key
-- (16 hex digits) as strings on each of its rows: 6.3M sessions at 20M searches, and writing
-- those two string columns took 2.6 s of the 3.6 s the table's rows took to write. Now the
-- table keeps the numbers they are made of (kind, key, number, file_id, line, actor) and both
-- names are virtual columns, spelled when read, the same text as before. Rows from an earlier
-- build keep their names in legacy_id and legacy_actor (the next review rebuilds the table).
CREATE TABLE session_traffic_v13 (
    session         BIGINT,
    kind            UTINYINT,               -- 0 with neither key, 1 a session key, 2 a user key
    key             UBIGINT,                -- the session key, else the user key
    number          BIGINT,                 -- the n-th session of a user key (1 otherwise)
    file_id         INTEGER,                -- the first search of a session with neither key
    line            BIGINT,
    actor           UBIGINT,                -- the user key, else the session key; NULL without
    legacy_id       VARCHAR,                -- the name stored by schema 12 and earlier
    legacy_actor    VARCHAR,
    searches        BIGINT NOT NULL,
    first_at        TIMESTAMPTZ NOT NULL,
    last_at         TIMESTAMPTZ NOT NULL,
    peak_per_minute BIGINT NOT NULL,        -- most searches in any 60 s span of the session
    peak_per_hour   BIGINT NOT NULL,        -- most searches in any 3600 s span of the session
    median_gap_s    DOUBLE,                 -- median seconds between consecutive searches
    verdict         VARCHAR NOT NULL,
    session_id      VARCHAR GENERATED ALWAYS AS (coalesce(legacy_id, CASE kind
        WHEN 0 THEN 'r:' || file_id || ':' || line
        WHEN 1 THEN 's:' || printf('%016x', key)
        ELSE 'u:' || printf('%016x', key) || ':' || number END)) VIRTUAL,
    actor_key       VARCHAR GENERATED ALWAYS AS (coalesce(legacy_actor, printf('%016x', actor)))
        VIRTUAL
);
INSERT INTO session_traffic_v13 (
    session, legacy_id, legacy_actor, searches, first_at, last_at, peak_per_minute,
    peak_per_hour, median_gap_s, verdict
)
SELECT session, session_id, actor_key, searches, first_at, last_at, peak_per_minute,
       peak_per_hour, median_gap_s, verdict
FROM session_traffic;
DROP TABLE session_traffic;
ALTER TABLE session_traffic_v13 RENAME TO session_traffic;
