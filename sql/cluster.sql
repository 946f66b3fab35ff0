-- Cluster stage: the failing queries of a review in, clusters and their members out.

-- name: cluster_failing
-- The failing (zero and low) queries of a review with their searches (bots left out by the flag
-- stage), in a fixed order.
-- $review_id: the review
SELECT query, searches, status FROM review_queries
WHERE review_id = $review_id AND status <> 'ok'
ORDER BY query;

-- name: cluster_unmatched
-- The unmatched terms (not on the best page) of each failing query of a review, with their df.
-- $review_id: the review
-- $index_id: the index the review scored against
SELECT r.query, t.term, t.df
FROM review_queries r
JOIN query_terms t ON t.index_id = $index_id AND t.query = r.query
WHERE r.review_id = $review_id AND r.status <> 'ok' AND NOT t.in_best
ORDER BY r.query, t.position;

-- name: cluster_clear_members
-- Forget an earlier clustering of the review (reruns replace, never add).
-- $review_id: the review
DELETE FROM cluster_members WHERE review_id = $review_id;

-- name: cluster_clear
-- $review_id: the review
DELETE FROM clusters WHERE review_id = $review_id;

-- name: cluster_store_members
-- Store the registered frame cluster_members_df (cluster_id, query, searches, key_term).
-- $review_id: the review
INSERT INTO cluster_members
SELECT $review_id, cluster_id, query, searches, key_term FROM cluster_members_df;

-- name: cluster_store
-- Store the registered frame clusters_df with each cluster's volume in the previous window: the
-- non-bot searches of its member queries there. previous_searches and change are NULL when the
-- workspace holds no search at all in the previous window. Reads cluster_members_df, searches,
-- search_sessions; writes clusters.
-- $review_id: the review
-- $prev_start: previous window start (inclusive)
-- $prev_end: previous window end (exclusive)
-- The bot test is an anti-join with the bot searches alone (as in review_flag), not a join of
-- every search with its session row (that join took most of week 2's cluster stage at M).
INSERT INTO clusters
WITH prev_win AS (
    SELECT s.query FROM searches s
    WHERE s.searched_at >= $prev_start AND s.searched_at < $prev_end
      AND NOT EXISTS (SELECT 1 FROM search_sessions b
                      WHERE b.is_bot AND b.file_id = s.file_id AND b.line = s.line)
), covered AS (
    SELECT count(*) > 0 AS has FROM searches
    WHERE searched_at >= $prev_start AND searched_at < $prev_end
), prev_volume AS (
    SELECT m.cluster_id, count(p.query) AS searches
    FROM cluster_members_df m LEFT JOIN prev_win p ON p.query = m.query
    GROUP BY m.cluster_id
)
SELECT $review_id, c.cluster_id, c.label, c.searches, c.queries, c.examples, c.terms,
       CASE WHEN k.has THEN p.searches END,
       CASE WHEN k.has THEN c.searches - p.searches END
FROM clusters_df c JOIN prev_volume p ON p.cluster_id = c.cluster_id CROSS JOIN covered k;

-- name: cluster_list
-- The clusters of a review, most searched first.
-- $review_id: the review
SELECT cluster_id, label, searches, queries, examples, terms, previous_searches, change
FROM clusters WHERE review_id = $review_id ORDER BY cluster_id;

-- name: cluster_vocabulary
-- The words of the content (the index's terms) with their document frequency.
-- $index_id: the index the review scored against
SELECT term, df FROM terms WHERE index_id = $index_id AND df > 0;
