-- querygap workspace schema, version 12: a search's session is a number; its name is kept once.
--
-- search_sessions held each search's session name ('s:<key>', 'u:<key>:<n>', 'r:<file>:<line>'),
-- a string of about 20 characters on every one of 20M rows, written and joined as a string.
-- Now it holds session, a BIGINT numbered by each build of the session stage, and
-- session_traffic keeps the name (session_id) once per session beside that number. The session
-- stage rebuilds both tables at every review; the rows already stored are numbered here, by
-- name.
CREATE TEMP TABLE session_numbers AS
SELECT session_id, (row_number() OVER (ORDER BY session_id) - 1)::BIGINT AS session
FROM (SELECT session_id FROM search_sessions UNION SELECT session_id FROM session_traffic);

CREATE TABLE search_sessions_v12 (
    file_id INTEGER NOT NULL,
    line    BIGINT NOT NULL,
    session BIGINT NOT NULL,   -- session_traffic.session
    is_bot  BOOLEAN NOT NULL
);
INSERT INTO search_sessions_v12
SELECT s.file_id, s.line, n.session, s.is_bot
FROM search_sessions s JOIN session_numbers n USING (session_id);
DROP TABLE search_sessions;
ALTER TABLE search_sessions_v12 RENAME TO search_sessions;

CREATE TABLE session_traffic_v12 (
    session         BIGINT NOT NULL,
    session_id      VARCHAR NOT NULL,     -- the session's name
    actor_key       VARCHAR,              -- the user key, else the session key; NULL without either
    searches        BIGINT NOT NULL,
    first_at        TIMESTAMPTZ NOT NULL,
    last_at         TIMESTAMPTZ NOT NULL,
    peak_per_minute BIGINT NOT NULL,      -- most searches in any 60 s span of the session
    peak_per_hour   BIGINT NOT NULL,      -- most searches in any 3600 s span of the session
    median_gap_s    DOUBLE,               -- median seconds between consecutive searches; NULL for one
    verdict         VARCHAR NOT NULL
);
INSERT INTO session_traffic_v12
SELECT n.session, t.* FROM session_traffic t JOIN session_numbers n USING (session_id);
DROP TABLE session_traffic;
ALTER TABLE session_traffic_v12 RENAME TO session_traffic;
DROP TABLE session_numbers;
