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
-- Searches per day of the window and status; day 0 is the window's first day, day d the 86,400
-- seconds from d days after window_start (a day of the window's own time zone, but for a day
-- with a clock change). Reads searches, search_sessions, review_queries. The day comes from
-- epoch microseconds: date_diff('second', ...) on a TIMESTAMPTZ went through the calendar and cost
-- 7 s of this statement's 9 s at 20M searches. The window comes as parameters, not from a join
-- with reviews, so the scan can skip row groups outside it.
-- $review_id: the review
-- $start: window start (inclusive)
-- $end: window end (exclusive)
SELECT ((epoch_us(s.searched_at) - epoch_us($start::TIMESTAMPTZ)) // 86400000000)::INTEGER AS day,
       q.status, count(*)::BIGINT AS searches
FROM searches s
JOIN review_queries q ON q.review_id = $review_id AND q.query = s.query
WHERE s.searched_at >= $start AND s.searched_at < $end
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
WHERE table_schema = 'main'
  AND table_name IN ('clusters', 'cluster_members', 'proposals', 'decision_checks', 'simulations',
                     'simulation_rules')
GROUP BY table_name ORDER BY table_name;

-- name: report_clusters
-- The review's clusters, most failing searches first, each with its best fix: among the rank-1
-- proposals whose term is the key term of a member query, the one that rescues most searches.
-- fix_rescued counts every failing search holding the fix's term (not only the cluster's);
-- searches_with_fix: the cluster's searches whose key term has a spelling, synonym or variant
-- proposal. Reads clusters, cluster_members, proposals. Only run when table clusters exists.
-- $review_id: the review
WITH best AS (
  SELECT term, kind, suggestion, rescued FROM proposals WHERE review_id = $review_id AND rank = 1
), member_fix AS (
  SELECT m.cluster_id, b.term, b.kind, b.suggestion, b.rescued, sum(m.searches) AS member_searches
  FROM cluster_members m JOIN best b ON b.term = m.key_term
  WHERE m.review_id = $review_id
  GROUP BY ALL
), ranked AS (
  SELECT *,
         row_number() OVER (PARTITION BY cluster_id
                            ORDER BY rescued DESC, member_searches DESC, term) AS n,
         count(*) OVER (PARTITION BY cluster_id) AS fixes,
         sum(CASE WHEN kind <> 'content_gap' THEN member_searches ELSE 0 END)
           OVER (PARTITION BY cluster_id) AS searches_with_fix
  FROM member_fix
)
SELECT c.review_id, c.cluster_id, c.label, c.searches, c.queries, c.previous_searches, c.change,
       r.kind AS fix_kind, r.term AS fix_term, r.suggestion AS fix_suggestion,
       r.rescued::BIGINT AS fix_rescued, coalesce(r.fixes, 0)::BIGINT AS fixes,
       coalesce(r.searches_with_fix, 0)::BIGINT AS searches_with_fix
FROM clusters c LEFT JOIN ranked r ON r.cluster_id = c.cluster_id AND r.n = 1
WHERE c.review_id = $review_id
ORDER BY c.searches DESC, c.label;

-- name: report_proposals
-- The review's proposals, most rescued searches first. Only run when table proposals exists.
-- $review_id: the review
SELECT review_id, kind, term, suggestion, searches, rescued, round(confidence, 2) AS confidence,
       evidence
FROM proposals WHERE review_id = $review_id AND rank = 1
ORDER BY rescued DESC, searches DESC, term;

-- name: report_checks
-- Checks of accepted decisions recorded at the review. Only run when decision_checks exists.
-- Reads decision_checks.
-- $review_id: the review
SELECT review_id, kind, term, replacement, decided_at, before_searches, after_searches,
       failure_before, failure_after, difference, newcombe_lower, newcombe_upper, p_value,
       verdict, reason
FROM decision_checks WHERE review_id = $review_id ORDER BY kind, term, replacement;

-- name: report_latest_simulation
-- The review's most recent simulation of a rules file. Reads simulations.
-- $review_id: the review
SELECT simulation_id, rules_file, not_rejected, created_at FROM simulations
WHERE review_id = $review_id ORDER BY created_at DESC, simulation_id LIMIT 1;

-- name: report_simulation_rules
-- The rules of one simulation with their effect, in file order. Reads simulation_rules.
-- $simulation_id: the simulation
SELECT line, kind, term, replacement, direction, status, effect, queries, searches,
       fixed_searches, still_failing_searches, newly_failing_searches, regressed_searches
FROM simulation_rules WHERE simulation_id = $simulation_id ORDER BY line;
