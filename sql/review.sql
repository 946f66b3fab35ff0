-- Score and flag stages for one review window.

-- name: review_log_span
-- The first and last search instants in the workspace.
SELECT min(searched_at), max(searched_at), count(*) FROM searches;

-- name: review_unscored_queries
-- Unique queries searched in the window that have no score against the index yet.
-- $start: window start (inclusive)
-- $end: window end (exclusive)
-- $index_id: the current index
SELECT DISTINCT s.query FROM searches s
WHERE s.searched_at >= $start AND s.searched_at < $end
  AND NOT EXISTS (SELECT 1 FROM query_scores q WHERE q.index_id = $index_id AND q.query = s.query)
ORDER BY 1;

-- name: review_clear_queries
-- Forget an earlier run of the same review (reruns replace, never add).
-- $review_id: the review
DELETE FROM review_queries WHERE review_id = $review_id;

-- name: review_clear
-- $review_id: the review
DELETE FROM reviews WHERE review_id = $review_id;

-- name: review_record
-- $review_id: the review (ISO week like 2026-W46, or from_to dates)
-- $start: window start (inclusive)
-- $end: window end (exclusive)
-- $index_id: the index scored against
-- $settings: JSON of the thresholds and options
INSERT INTO reviews VALUES ($review_id, $start, $end, $index_id, $settings, now());

-- name: review_flag
-- Every unique query of the window with volume, content score and status. Reads searches,
-- search_sessions, query_scores; writes review_queries. Searches of bot sessions (is_bot) are left
-- out of every count; a search the session stage has not seen counts. Status: zero when no query
-- term is on any page (or the
-- query has no terms); low when the best page's cosine is below $min_score or its coverage below
-- $min_coverage; ok otherwise.
-- $review_id: the review
-- $start: window start (inclusive)
-- $end: window end (exclusive)
-- $index_id: the index scored against
-- $min_score: lowest best-page cosine that is not low
-- $min_coverage: lowest best-page coverage that is not low
-- The bot test is an anti-join with the bot searches alone (a small hash table), not a join of
-- every search with its session row.
INSERT INTO review_queries
WITH win AS (
    SELECT s.query, s.query_text, s.user_key, s.session_key, s.results, s.clicks
    FROM searches s
    WHERE s.searched_at >= $start AND s.searched_at < $end
      AND NOT EXISTS (SELECT 1 FROM search_sessions b
                      WHERE b.is_bot AND b.file_id = s.file_id AND b.line = s.line)
), texts AS (
    -- the counts per (query, text), summed per query below: one pass over the searches fewer
    -- than counting them per query again (11 s -> 9 s at 20M searches)
    SELECT query, query_text, count(*) AS n,
           count(results) AS engine_searches,
           count(*) FILTER (WHERE results = 0) AS engine_empty,
           count(clicks) AS click_searches,
           count(*) FILTER (WHERE clicks > 0) AS clicked,
           row_number() OVER (PARTITION BY query ORDER BY count(*) DESC, query_text) AS pick
    FROM win GROUP BY query, query_text
), seen AS (
    SELECT query, count(DISTINCT coalesce(user_key, session_key)) AS visitors
    FROM win GROUP BY query
), vol AS (
    SELECT t.query, sum(t.n)::BIGINT AS searches, any_value(s.visitors) AS visitors,
           sum(t.engine_searches)::BIGINT AS engine_searches,
           sum(t.engine_empty)::BIGINT AS engine_empty,
           sum(t.click_searches)::BIGINT AS click_searches, sum(t.clicked)::BIGINT AS clicked
    FROM texts t JOIN seen s ON s.query = t.query GROUP BY t.query
)
SELECT $review_id, v.query, t.query_text, v.searches, v.visitors,
       CASE WHEN q.n_known = 0 THEN 'zero'
            WHEN q.best_score < $min_score OR q.coverage < $min_coverage THEN 'low'
            ELSE 'ok' END,
       q.best_score, q.coverage, q.best_doc,
       v.engine_searches, v.engine_empty, v.click_searches, v.clicked
FROM vol v
JOIN texts t ON t.query = v.query AND t.pick = 1
JOIN query_scores q ON q.query = v.query AND q.index_id = $index_id;

-- name: review_totals
-- Headline figures of a review, per status: searches and unique queries.
-- $review_id: the review
SELECT status, sum(searches)::BIGINT AS searches, count(*) AS queries,
       sum(engine_searches)::BIGINT AS engine_searches, sum(engine_empty)::BIGINT AS engine_empty,
       sum(click_searches)::BIGINT AS click_searches, sum(clicked)::BIGINT AS clicked
FROM review_queries WHERE review_id = $review_id GROUP BY status ORDER BY status;

-- name: review_disagreements
-- Where the engine's own signal and the content score disagree, in searches and unique queries:
-- content_only = the content matches well (ok) but the engine showed nothing for most searches;
-- engine_only = the content has no good match (zero or low) but the engine showed results.
-- $review_id: the review
SELECT
    count(*) FILTER (WHERE status = 'ok' AND engine_empty * 2 > engine_searches) AS content_only_queries,
    coalesce(sum(searches) FILTER (WHERE status = 'ok' AND engine_empty * 2 > engine_searches), 0)::BIGINT AS content_only_searches,
    count(*) FILTER (WHERE status <> 'ok' AND engine_searches > 0 AND engine_empty * 2 < engine_searches) AS engine_only_queries,
    coalesce(sum(searches) FILTER (WHERE status <> 'ok' AND engine_searches > 0 AND engine_empty * 2 < engine_searches), 0)::BIGINT AS engine_only_searches,
    coalesce(sum(engine_searches), 0)::BIGINT AS engine_searches
FROM review_queries WHERE review_id = $review_id;

-- name: review_failing
-- The failing queries of a review, most searched first, with their terms and top page.
-- Reads review_queries, query_terms, documents.
-- $review_id: the review
-- $index_id: the index the review scored against
-- $limit: the most searched so many (NULL: all)
SELECT r.query, r.example, r.searches, r.visitors, r.status, r.best_score, r.coverage,
       coalesce((SELECT string_agg(t.term, ' ' ORDER BY t.position) FROM query_terms t
                 WHERE t.index_id = $index_id AND t.query = r.query AND NOT t.in_best), '') AS unmatched_terms,
       coalesce((SELECT string_agg(t.term, ' ' ORDER BY t.position) FROM query_terms t
                 WHERE t.index_id = $index_id AND t.query = r.query AND t.df = 0), '') AS unknown_terms,
       coalesce(d.url, r.best_doc, '') AS top_page, coalesce(d.title, '') AS top_page_title,
       r.engine_searches, r.engine_empty, r.click_searches, r.clicked
FROM review_queries r LEFT JOIN documents d ON d.doc_id = r.best_doc
WHERE r.review_id = $review_id AND r.status <> 'ok'
ORDER BY r.searches DESC, r.query
LIMIT $limit;

-- name: review_failing_csv
-- failing_queries.csv's rows as CSV lines ending in CR LF, in the order and columns of
-- review_failing plus the shares (review.FAILING_COLUMNS); keep the two statements in step.
-- Shares are engine_empty / engine_searches and clicked / click_searches (empty when the log has
-- no such signal), rounded to 3 places; best_score and coverage to 4. Needs csv_macros.
-- Reads review_queries, query_terms, documents.
-- $review_id: the review
-- $index_id: the index the review scored against
-- $triggers: first characters that make a cell a formula (safe_csv.FORMULA_TRIGGERS)
WITH failing AS (
    SELECT * FROM review_queries WHERE review_id = $review_id AND status <> 'ok'
), terms AS (
    SELECT t.query,
           string_agg(t.term, ' ' ORDER BY t.position) FILTER (WHERE NOT t.in_best) AS unmatched,
           string_agg(t.term, ' ' ORDER BY t.position) FILTER (WHERE t.df = 0) AS unknown
    FROM query_terms t SEMI JOIN failing f ON f.query = t.query
    WHERE t.index_id = $index_id
    GROUP BY t.query
)
SELECT csv_text(r.query, $triggers) || ','
       || csv_number(r.searches) || ','
       || csv_text(r.status, $triggers) || ','
       || csv_number(csv_round(r.best_score, 4)) || ','
       || csv_number(csv_round(r.coverage, 4)) || ','
       || csv_text(coalesce(t.unmatched, ''), $triggers) || ','
       || csv_text(coalesce(d.url, r.best_doc, ''), $triggers) || ','
       || csv_text(r.example, $triggers) || ','
       || csv_text(coalesce(t.unknown, ''), $triggers) || ','
       || csv_text(coalesce(d.title, ''), $triggers) || ','
       || csv_number(r.visitors) || ','
       || csv_number(CASE WHEN r.engine_searches > 0
                          THEN csv_round(r.engine_empty / r.engine_searches, 3) END) || ','
       || csv_number(CASE WHEN r.click_searches > 0
                          THEN csv_round(r.clicked / r.click_searches, 3) END)
       || chr(13) || chr(10) AS line
FROM failing r
LEFT JOIN terms t ON t.query = r.query
LEFT JOIN documents d ON d.doc_id = r.best_doc
ORDER BY r.searches DESC, r.query;
