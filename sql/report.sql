-- Report stage: read the tables of one review (and of the review before it) for the HTML page.
-- Writes nothing.

-- name: report_review
-- The review's window and index. Reads reviews.
-- $review_id: the review
SELECT review_id, window_start, window_end, index_id FROM reviews WHERE review_id = $review_id;

-- name: report_previous_review
-- The review of the window of the same length that ends where this one starts, if any.
-- Reads reviews.
-- $review_id: the review
SELECT p.review_id FROM reviews r JOIN reviews p
  ON p.window_end = r.window_start
 AND p.window_end - p.window_start = r.window_end - r.window_start
WHERE r.review_id = $review_id
ORDER BY p.created_at DESC;

-- name: report_daily
-- Searches per day of the window and status; day 0 is the window's first day (the window's own
-- time zone is kept, since days are counted from window_start). Reads reviews, searches,
-- review_queries.
-- $review_id: the review
SELECT (date_diff('second', r.window_start, s.searched_at) // 86400)::INTEGER AS day,
       q.status, count(*)::BIGINT AS searches
FROM reviews r
JOIN searches s ON s.searched_at >= r.window_start AND s.searched_at < r.window_end
JOIN review_queries q ON q.review_id = r.review_id AND q.query = s.query
WHERE r.review_id = $review_id
  AND NOT EXISTS (SELECT 1 FROM search_sessions b  -- bot searches are left out, as in the review
                  WHERE b.file_id = s.file_id AND b.line = s.line AND b.is_bot)
GROUP BY ALL ORDER BY day, q.status;

-- name: report_profile
-- Every unique query of the review, most searched first: the frequency profile. Reads
-- review_queries.
-- $review_id: the review
SELECT query, example, searches, status FROM review_queries
WHERE review_id = $review_id ORDER BY searches DESC, query;

-- name: report_changes
-- Failing queries of this review against the previous one: new (failing now, not failing before),
-- recurring (failing in both), resolved (failing before, searched now and ok). Queries that failed
-- before and were not searched now are 'not searched'. Reads review_queries.
-- $review_id: the review
-- $previous_id: the previous review
WITH cur AS (SELECT * FROM review_queries WHERE review_id = $review_id),
prev AS (SELECT * FROM review_queries WHERE review_id = $previous_id)
SELECT coalesce(c.query, p.query) AS query, coalesce(c.example, p.example) AS example,
       coalesce(c.searches, 0)::BIGINT AS searches, coalesce(p.searches, 0)::BIGINT AS previous_searches,
       coalesce(c.status, '') AS status, coalesce(p.status, '') AS previous_status,
       CASE WHEN c.status <> 'ok' AND coalesce(p.status, 'ok') = 'ok' THEN 'new'
            WHEN c.status <> 'ok' THEN 'recurring'
            WHEN c.status = 'ok' THEN 'resolved'
            ELSE 'not searched' END AS change
FROM cur c FULL OUTER JOIN prev p ON p.query = c.query
WHERE c.status <> 'ok' OR p.status <> 'ok'
ORDER BY change, searches DESC, previous_searches DESC, query;

-- name: report_optional_tables
-- Which of the tables added by later stages exist, with their columns. Reads information_schema.
SELECT table_name, list(column_name ORDER BY ordinal_position) AS columns
FROM information_schema.columns
WHERE table_schema = 'main' AND table_name IN ('clusters', 'proposals', 'checks')
GROUP BY table_name ORDER BY table_name;

-- name: report_clusters
-- The review's clusters, most failing searches first. Only run when table clusters exists.
-- $review_id: the review
SELECT review_id, cluster_id, label, searches, queries, previous_searches, change
FROM clusters WHERE review_id = $review_id ORDER BY searches DESC, label;

-- name: report_proposals
-- The review's proposals, most rescued searches first. Only run when table proposals exists.
-- $review_id: the review
SELECT review_id, kind, term, suggestion, searches, rescued, round(confidence, 2) AS confidence,
       evidence
FROM proposals WHERE review_id = $review_id AND rank = 1
ORDER BY rescued DESC, searches DESC, term;

-- name: report_checks
-- Checks of accepted decisions recorded at the review. Only run when decision_checks exists.
-- $review_id: the review
SELECT * FROM decision_checks WHERE review_id = $review_id ORDER BY kind, term;
