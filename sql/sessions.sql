-- Session stage: a session for every search, rate figures per session, and the bot verdict.
-- The stage rebuilds its tables from searches, so a rerun gives the same rows.

-- name: sessions_clear
-- Forget the previous build of the session stage (search_sessions, session_traffic).
DELETE FROM search_sessions;

-- name: sessions_clear_traffic
DELETE FROM session_traffic;

-- name: sessions_assign
-- One row per search in search_sessions (is_bot false until sessions_mark_bots). Reads searches.
-- A search with a session key belongs to that key's session ('s:<key>'). Otherwise the searches of
-- one user key, ordered by time, start a new session after a gap longer than $gap_seconds
-- ('u:<key>:<n>', n = 1, 2, ...). A search with neither key is a session of its own
-- ('r:<file_id>:<line>').
-- $gap_seconds: inactivity, in seconds, after which a user's next search opens a new session
INSERT INTO search_sessions
WITH by_user AS (
    SELECT file_id, line, user_key, searched_at,
           CASE WHEN lag(searched_at) OVER w IS NULL
                  OR epoch(searched_at) - epoch(lag(searched_at) OVER w) > $gap_seconds
                THEN 1 ELSE 0 END AS opens
    FROM searches
    WHERE session_key IS NULL AND user_key IS NOT NULL
    WINDOW w AS (PARTITION BY user_key ORDER BY searched_at, file_id, line)
), numbered AS (
    SELECT file_id, line,
           'u:' || user_key || ':' || sum(opens) OVER (
               PARTITION BY user_key ORDER BY searched_at, file_id, line
               ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS session_id
    FROM by_user
)
SELECT file_id, line, session_id, false FROM numbered
UNION ALL
SELECT file_id, line, 's:' || session_key, false FROM searches WHERE session_key IS NOT NULL
UNION ALL
SELECT file_id, line, 'r:' || file_id || ':' || line, false
FROM searches WHERE session_key IS NULL AND user_key IS NULL;

-- name: sessions_traffic
-- Rate figures and verdict of every session. Reads search_sessions, searches; writes
-- session_traffic. Three criteria, each with a human limit and a bot limit (a session beyond a
-- bot limit is 'bot'; beyond a human limit only, 'suspect'; else 'human'):
-- searches within any 60 s, searches within any 3600 s, and the median gap between consecutive
-- searches (only for sessions of at least $min_searches searches).
-- $human_per_minute: most searches in 60 s a person plausibly makes
-- $bot_per_minute: searches in 60 s beyond which the session is a machine
-- $human_per_hour: most searches in 3600 s a person plausibly makes
-- $bot_per_hour: searches in 3600 s beyond which the session is a machine
-- $human_median_gap: median gap (s) at or above which a long session looks human
-- $bot_median_gap: median gap (s) below which a long session is a machine
-- $min_searches: fewest searches for the median-gap criterion to apply
INSERT INTO session_traffic
WITH rows AS (
    SELECT ss.session_id, coalesce(s.user_key, s.session_key) AS actor_key, s.searched_at,
           epoch(s.searched_at) - epoch(lag(s.searched_at) OVER w) AS gap,
           count(*) OVER (PARTITION BY ss.session_id ORDER BY s.searched_at
                          RANGE BETWEEN INTERVAL 60 SECONDS PRECEDING AND CURRENT ROW) AS in_minute,
           count(*) OVER (PARTITION BY ss.session_id ORDER BY s.searched_at
                          RANGE BETWEEN INTERVAL 3600 SECONDS PRECEDING AND CURRENT ROW) AS in_hour
    FROM search_sessions ss JOIN searches s ON s.file_id = ss.file_id AND s.line = ss.line
    WINDOW w AS (PARTITION BY ss.session_id ORDER BY s.searched_at, s.file_id, s.line)
), per_session AS (
    SELECT session_id, any_value(actor_key) AS actor_key, count(*) AS searches,
           min(searched_at) AS first_at, max(searched_at) AS last_at,
           max(in_minute) AS peak_per_minute, max(in_hour) AS peak_per_hour,
           median(gap) AS median_gap_s
    FROM rows GROUP BY session_id
)
SELECT session_id, actor_key, searches, first_at, last_at, peak_per_minute, peak_per_hour,
       median_gap_s,
       CASE WHEN peak_per_minute > $bot_per_minute OR peak_per_hour > $bot_per_hour
                 OR (searches >= $min_searches AND median_gap_s < $bot_median_gap) THEN 'bot'
            WHEN peak_per_minute > $human_per_minute OR peak_per_hour > $human_per_hour
                 OR (searches >= $min_searches AND median_gap_s < $human_median_gap) THEN 'suspect'
            ELSE 'human' END
FROM per_session;

-- name: sessions_mark_bots
-- Set is_bot on every search of a 'bot' session. Reads session_traffic; updates search_sessions.
UPDATE search_sessions SET is_bot = true
WHERE session_id IN (SELECT session_id FROM session_traffic WHERE verdict = 'bot');

-- name: sessions_summary
-- Sessions, searches and distinct actor keys per verdict.
SELECT verdict, count(*) AS sessions, sum(searches)::BIGINT AS searches,
       count(DISTINCT coalesce(actor_key, session_id)) AS keys
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
JOIN session_traffic t ON t.session_id = ss.session_id
WHERE s.searched_at >= $start AND s.searched_at < $end AND t.verdict IN ('bot', 'suspect');

-- name: sessions_review_bot_keys
-- The bot actors of a review window with their searches there, most first.
-- $start: window start (inclusive)
-- $end: window end (exclusive)
SELECT coalesce(t.actor_key, t.session_id) AS actor_key, count(*) AS searches,
       max(t.peak_per_minute) AS peak_per_minute, min(t.median_gap_s) AS median_gap_s
FROM searches s
JOIN search_sessions ss ON ss.file_id = s.file_id AND ss.line = s.line
JOIN session_traffic t ON t.session_id = ss.session_id
WHERE s.searched_at >= $start AND s.searched_at < $end AND t.verdict = 'bot'
GROUP BY 1 ORDER BY searches DESC, actor_key;

-- name: sessions_review_bots_row
-- The stored bot figures of one review.
-- $review_id: the review
SELECT bot_keys, bot_searches, suspect_keys, suspect_searches FROM review_bots
WHERE review_id = $review_id;
