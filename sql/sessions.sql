-- Session stage: a session for every search, rate figures per session, and the bot verdict.
-- The stage rebuilds its tables from searches, so a rerun gives the same rows.

-- name: sessions_clear
-- Forget the previous build of the session stage (search_sessions, session_traffic, search_steps).
DELETE FROM search_sessions;

-- name: sessions_clear_traffic
DELETE FROM session_traffic;

-- name: sessions_clear_steps
DELETE FROM search_steps;

-- name: sessions_order
-- Every search's rowid in the order querygap.session_split walks: by actor kind (0 with neither
-- key, 1 with a session key, 2 with a user key only), actor (the session key, else the user
-- key; 0 with neither), time in microseconds since the epoch, then rowid. Only sort keys are
-- output: DuckDB sorts them several times faster than rows that carry other columns (3 s
-- against 11 s for 25M searches). querygap.session_split.in_file_order then puts searches of
-- one actor at one instant in file and line order. Reads searches.
SELECT kind, key, at_us, r
FROM (
    SELECT CASE WHEN session_key IS NOT NULL THEN 1 WHEN user_key IS NOT NULL THEN 2 ELSE 0
           END::UTINYINT AS kind,
           coalesce(session_key, user_key, 0::UBIGINT) AS key,
           epoch_us(searched_at)::BIGINT AS at_us, rowid AS r
    FROM searches
)
ORDER BY kind, key, at_us, r;

-- name: sessions_payload
-- Every search by rowid (in scan order): file, line, the actor key as shown (the user key, else
-- the session key; 0 with neither) and a 64-bit hash of its query (to tell consecutive searches
-- of different queries apart). Reads searches.
SELECT rowid AS r, file_id, line, coalesce(user_key, session_key, 0::UBIGINT) AS actor_key,
       hash(query) AS query_hash
FROM searches;

-- name: sessions_name
-- Name each session and give it its verdict. Reads the registered frame session_figures (one row
-- per session: session, has_key, is_user, key, actor_key, number, file_id and line of its first
-- search, searches, first_us, last_us, peak_per_minute, peak_per_hour, median_gap_s); writes
-- the temporary table session_named. A session key's session is 's:<key>'; the n-th session of
-- a user key 'u:<key>:<n>'; a search with neither key 'r:<file_id>:<line>'. The actor key is the
-- first search's user key, else its session key. Keys are shown as their 16 hex digits. Only
-- the numbers are kept: session_traffic spells the names when they are read (schema 13).
-- Three criteria, each with a human limit and a bot limit (a session beyond a bot limit is 'bot';
-- beyond a human limit only, 'suspect'; else 'human'): searches within any 60 s, searches within
-- any 3600 s, and the median gap between consecutive searches (only for sessions of at least
-- $min_searches searches).
-- $human_per_minute: most searches in 60 s a person plausibly makes
-- $bot_per_minute: searches in 60 s beyond which the session is a machine
-- $human_per_hour: most searches in 3600 s a person plausibly makes
-- $bot_per_hour: searches in 3600 s beyond which the session is a machine
-- $human_median_gap: median gap (s) at or above which a long session looks human
-- $bot_median_gap: median gap (s) below which a long session is a machine
-- $min_searches: fewest searches for the median-gap criterion to apply
CREATE OR REPLACE TEMP TABLE session_named AS
SELECT f.session,
       (CASE WHEN NOT f.has_key THEN 0 WHEN NOT f.is_user THEN 1 ELSE 2 END)::UTINYINT AS kind,
       CASE WHEN f.has_key THEN f.key END AS key, f.number, f.file_id, f.line,
       CASE WHEN f.has_key THEN f.actor_key END AS actor,
       f.searches, make_timestamptz(f.first_us) AS first_at, make_timestamptz(f.last_us) AS last_at,
       f.peak_per_minute, f.peak_per_hour, f.median_gap_s,
       CASE WHEN f.peak_per_minute > $bot_per_minute OR f.peak_per_hour > $bot_per_hour
                 OR (f.searches >= $min_searches AND f.median_gap_s < $bot_median_gap) THEN 'bot'
            WHEN f.peak_per_minute > $human_per_minute OR f.peak_per_hour > $human_per_hour
                 OR (f.searches >= $min_searches AND f.median_gap_s < $human_median_gap)
                 THEN 'suspect'
            ELSE 'human' END AS verdict
FROM session_figures f;

-- name: sessions_traffic
-- Rate figures and verdict of every session. Reads session_named; writes session_traffic.
INSERT INTO session_traffic (
    session, kind, key, number, file_id, line, actor, searches, first_at, last_at,
    peak_per_minute, peak_per_hour, median_gap_s, verdict
)
SELECT session, kind, key, number, file_id, line, actor, searches, first_at, last_at,
       peak_per_minute, peak_per_hour, median_gap_s, verdict
FROM session_named;

-- name: sessions_assign
-- One row per search in search_sessions, is_bot set for the searches of a 'bot' session. Reads
-- the registered frame session_rows (file_id, line, session), session_named.
INSERT INTO search_sessions (file_id, line, session, is_bot)
SELECT r.file_id, r.line, r.session, n.verdict = 'bot'
FROM session_rows r JOIN session_named n ON n.session = r.session;

-- name: sessions_steps
-- The steps of the sessions that are not a bot's. Reads the registered frame session_steps (one
-- row per pair of consecutive searches of one session whose query hashes differ, at most
-- querygap.sessions.STEP_GAP_SECONDS apart: session, file_id, line, next_file_id, next_line,
-- searched_us, gap_us) and session_named; writes
-- search_steps. A pair of different queries with equal 64-bit hashes (about one in 10^19) would
-- be taken for a repeat and left out.
INSERT INTO search_steps
SELECT st.file_id, st.line, st.next_file_id, st.next_line, st.searched_us, st.gap_us
FROM session_steps st JOIN session_named n ON n.session = st.session
WHERE n.verdict <> 'bot';

-- name: sessions_drop_named
-- The stage's temporary table, no longer needed.
DROP TABLE IF EXISTS session_named;

-- name: sessions_summary
-- Sessions, searches and distinct actor keys per verdict. A session with neither key is an
-- actor of its own: count(DISTINCT coalesce(actor_key, session_id)), counted on the numbers the
-- names are spelled from.
SELECT verdict, count(*) AS sessions, sum(searches)::BIGINT AS searches,
       (count(DISTINCT coalesce(legacy_actor, legacy_id))
        + count(DISTINCT actor) FILTER (WHERE legacy_id IS NULL)
        + count(*) FILTER (WHERE legacy_id IS NULL AND actor IS NULL)) AS keys
FROM session_traffic GROUP BY verdict ORDER BY verdict;

-- name: sessions_clear_review_bots
-- $review_id: the review
DELETE FROM review_bots WHERE review_id = $review_id;

-- name: sessions_review_bots
-- Bot and suspect searches of a review window, and their distinct actor keys. Reads searches,
-- search_sessions, session_traffic; writes review_bots. Only bot and suspect sessions are
-- joined (human ones count nowhere here), so the join is as small as they are.
-- $review_id: the review
-- $start: window start (inclusive)
-- $end: window end (exclusive)
INSERT INTO review_bots
SELECT $review_id,
       count(DISTINCT coalesce(t.actor_key, t.session_id)) FILTER (WHERE t.verdict = 'bot'),
       count(*) FILTER (WHERE t.verdict = 'bot'),
       count(DISTINCT coalesce(t.actor_key, t.session_id)) FILTER (WHERE t.verdict = 'suspect'),
       count(*) FILTER (WHERE t.verdict = 'suspect')
FROM searches s
JOIN search_sessions ss ON ss.file_id = s.file_id AND ss.line = s.line
JOIN session_traffic t ON t.session = ss.session
WHERE s.searched_at >= $start AND s.searched_at < $end AND t.verdict IN ('bot', 'suspect');

-- name: sessions_review_bot_keys
-- The bot actors of a review window with their searches there, most first.
-- $start: window start (inclusive)
-- $end: window end (exclusive)
SELECT coalesce(t.actor_key, t.session_id) AS actor_key, count(*) AS searches,
       max(t.peak_per_minute) AS peak_per_minute, min(t.median_gap_s) AS median_gap_s
FROM searches s
JOIN search_sessions ss ON ss.file_id = s.file_id AND ss.line = s.line
JOIN session_traffic t ON t.session = ss.session
WHERE s.searched_at >= $start AND s.searched_at < $end AND t.verdict = 'bot'
GROUP BY 1 ORDER BY searches DESC, actor_key;

-- name: sessions_review_bots_row
-- The stored bot figures of one review.
-- $review_id: the review
SELECT bot_keys, bot_searches, suspect_keys, suspect_searches FROM review_bots
WHERE review_id = $review_id;
