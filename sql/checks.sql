-- Check stage: simulate a rules file on a review's queries; observe windows before and after a
-- change. Writes simulations, simulation_queries, simulation_rules, observations,
-- observation_rules, decision_checks.

-- name: checks_review
-- The review a simulation starts from. Reads reviews.
-- $review_id: the review
SELECT review_id, window_start, window_end, index_id, settings FROM reviews
WHERE review_id = $review_id;

-- name: checks_latest_review
-- The newest review, whose thresholds an observation uses. Reads reviews.
SELECT review_id, window_start, window_end, index_id, settings FROM reviews
ORDER BY created_at DESC, review_id DESC LIMIT 1;

-- name: checks_review_queries
-- Every unique query of a review with its volume, status, best cosine and best page.
-- Reads review_queries.
-- $review_id: the review
SELECT query, searches, status, best_score, coverage, best_doc FROM review_queries
WHERE review_id = $review_id ORDER BY searches DESC, query;

-- name: checks_clear_simulation_rules
-- $simulation_id: the simulation rerun
DELETE FROM simulation_rules WHERE simulation_id = $simulation_id;

-- name: checks_clear_simulation_queries
-- $simulation_id: the simulation rerun
DELETE FROM simulation_queries WHERE simulation_id = $simulation_id;

-- name: checks_clear_simulation
-- $simulation_id: the simulation rerun
DELETE FROM simulations WHERE simulation_id = $simulation_id;

-- name: checks_record_simulation
-- $simulation_id: review id, rules hash and selection
-- $review_id: the review
-- $index_id: the index scored against
-- $rules_file: path of the rules file
-- $rules_sha256: SHA-256 of its bytes
-- $not_rejected: whether every rule not rejected was applied
-- $score_margin: the regression margin on the best cosine
INSERT INTO simulations VALUES ($simulation_id, $review_id, $index_id, $rules_file, $rules_sha256,
    $not_rejected, $score_margin, now());

-- name: checks_store_simulation_queries
-- Writes simulation_queries from the registered frame sim_queries_df (same columns, same order).
INSERT INTO simulation_queries SELECT * FROM sim_queries_df;

-- name: checks_store_simulation_rules
-- Writes simulation_rules from the registered frame sim_rules_df (same columns, same order).
INSERT INTO simulation_rules SELECT * FROM sim_rules_df;

-- name: checks_window_queries
-- Per unique query of a window: searches, engine and click signals, and whether the query's
-- content score against the index is zero or low (NULL when it has no score yet). Bot searches
-- (search_sessions.is_bot) are left out. Reads searches, search_sessions, query_scores.
-- $start: window start (inclusive)
-- $end: window end (exclusive)
-- $index_id: the index the statuses come from
-- $min_score: lowest best-page cosine that is not low
-- $min_coverage: lowest best-page coverage that is not low
SELECT s.query,
       count(*) AS searches,
       count(s.results) AS engine,
       count(*) FILTER (WHERE s.results = 0) AS empty,
       count(s.clicks) AS click_rows,
       count(*) FILTER (WHERE s.clicks > 0) AS clicked,
       any_value(CASE WHEN q.query IS NULL THEN NULL
                      WHEN q.n_known = 0 OR q.best_score < $min_score
                           OR q.coverage < $min_coverage THEN TRUE
                      ELSE FALSE END) AS content_failing
FROM searches s
LEFT JOIN query_scores q ON q.index_id = $index_id AND q.query = s.query
WHERE s.searched_at >= $start AND s.searched_at < $end
  AND NOT EXISTS (SELECT 1 FROM search_sessions b  -- the bot searches alone, a small hash table
                  WHERE b.is_bot AND b.file_id = s.file_id AND b.line = s.line)
GROUP BY s.query ORDER BY s.query;

-- name: checks_bot_searches
-- Searches of a window marked as bots in search_sessions, and whether that table has any rows.
-- $start: window start (inclusive)
-- $end: window end (exclusive)
SELECT (SELECT count(*) FROM searches s JOIN search_sessions b
            ON b.file_id = s.file_id AND b.line = s.line
        WHERE b.is_bot AND s.searched_at >= $start AND s.searched_at < $end) AS bots,
       (SELECT count(*) FROM search_sessions) AS session_rows;

-- name: checks_clear_observation_rules
-- $observation_id: the observation rerun
DELETE FROM observation_rules WHERE observation_id = $observation_id;

-- name: checks_clear_observation
-- $observation_id: the observation rerun
DELETE FROM observations WHERE observation_id = $observation_id;

-- name: checks_record_observation
-- $observation_id: change date, windows and rules hash
-- $change_at: the instant the change went live
-- $before_start: before window start (inclusive)
-- $before_end: before window end (exclusive)
-- $after_start: after window start (inclusive)
-- $after_end: after window end (exclusive)
-- $rules_file: path of the rules file ('' for decisions)
-- $bot_searches: bot searches left out
-- $warnings: warnings printed with the result, one per line
INSERT INTO observations VALUES ($observation_id, $change_at, $before_start, $before_end,
    $after_start, $after_end, $rules_file, $bot_searches, $warnings, now());

-- name: checks_store_observation_rules
-- Writes observation_rules from the registered frame obs_rules_df (same columns, same order).
INSERT INTO observation_rules SELECT * FROM obs_rules_df;

-- name: checks_accepted_decisions
-- Accepted spelling, synonym and variant decisions, oldest first. Reads decisions.
SELECT kind, term, replacement, direction, decided_at, review_id, note FROM decisions
WHERE decision = 'accepted' AND kind IN ('spelling', 'synonym', 'variant')
ORDER BY decided_at, kind, term, replacement;

-- name: checks_clear_decision_checks
-- $review_id: the review whose checks are rerun
DELETE FROM decision_checks WHERE review_id = $review_id;

-- name: checks_store_decision_checks
-- Writes decision_checks from the registered frame decision_checks_df (same columns and order).
INSERT INTO decision_checks SELECT * FROM decision_checks_df;
