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

ALTER TABLE search_sessions ADD COLUMN session BIGINT;   -- session_traffic.session
UPDATE search_sessions SET session = n.session
FROM session_numbers n WHERE n.session_id = search_sessions.session_id;
ALTER TABLE search_sessions DROP COLUMN session_id;

ALTER TABLE session_traffic ADD COLUMN session BIGINT;
UPDATE session_traffic SET session = n.session
FROM session_numbers n WHERE n.session_id = session_traffic.session_id;
DROP TABLE session_numbers;
