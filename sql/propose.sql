-- Proposal stage: near-miss terms of a review's failing queries -> proposals, proposal_examples.

-- name: propose_review
-- The review's index and settings (the thresholds re-scoring uses).
-- $review_id: the review
SELECT review_id, index_id, settings, window_start, window_end FROM reviews WHERE review_id = $review_id;

-- name: propose_failing_terms
-- Every unmatched term of every failing query: unknown to the content (df = 0) or missing from the
-- query's best page. Reads review_queries, query_terms.
-- $review_id: the review
-- $index_id: the index the review scored against
SELECT r.query, r.example, r.searches, r.status, t.term, t.df, t.position
FROM review_queries r
JOIN query_terms t ON t.index_id = $index_id AND t.query = r.query
WHERE r.review_id = $review_id AND r.status <> 'ok' AND (t.df = 0 OR NOT t.in_best)
ORDER BY r.query, t.position;

-- name: propose_vocabulary
-- The content's terms with df, cf and the searches of the review's ok queries holding each term.
-- $review_id: the review
-- $index_id: the current index
SELECT v.term, v.df, v.cf, coalesce(o.ok_searches, 0)::BIGINT AS ok_searches
FROM terms v
LEFT JOIN (
    SELECT t.term, sum(r.searches) AS ok_searches
    FROM review_queries r JOIN query_terms t ON t.index_id = $index_id AND t.query = r.query
    WHERE r.review_id = $review_id AND r.status = 'ok'
    GROUP BY t.term
) o ON o.term = v.term
WHERE v.index_id = $index_id
ORDER BY v.term_id;

-- name: propose_substitutions
-- Consecutive searches of one session (bots excluded) at most $max_gap_seconds apart whose queries
-- differ in exactly one term: (term_from -> term_to), with the pair's count and both statuses.
-- Reads search_steps (kept by the session stage: consecutive searches of different queries, up
-- to querygap.sessions.STEP_GAP_SECONDS apart), searches, query_terms, review_queries.
-- $review_id: the review
-- $index_id: the index the review scored against
-- $start: window start (inclusive)
-- $end: window end (exclusive)
-- $max_gap_seconds: longest gap between the two searches
WITH st AS (
    SELECT * FROM search_steps
    WHERE searched_us >= epoch_us($start::TIMESTAMPTZ)
      AND searched_us + gap_us < epoch_us($end::TIMESTAMPTZ)
      AND gap_us <= $max_gap_seconds * 1000000
), p AS (
    SELECT x.query, y.query AS next_query, count(*) AS pairs
    FROM st
    JOIN searches x ON x.file_id = st.file_id AND x.line = st.line
    JOIN searches y ON y.file_id = st.next_file_id AND y.line = st.next_line
    WHERE y.query <> x.query
    GROUP BY x.query, y.query
), a_only AS (
    SELECT p.query, p.next_query, t.term FROM p
    JOIN query_terms t ON t.index_id = $index_id AND t.query = p.query
    ANTI JOIN query_terms u ON u.index_id = $index_id AND u.query = p.next_query AND u.term = t.term
), b_only AS (
    SELECT p.query, p.next_query, t.term FROM p
    JOIN query_terms t ON t.index_id = $index_id AND t.query = p.next_query
    ANTI JOIN query_terms u ON u.index_id = $index_id AND u.query = p.query AND u.term = t.term
), a1 AS (
    SELECT query, next_query, min(term) AS term FROM a_only GROUP BY ALL HAVING count(*) = 1
), b1 AS (
    SELECT query, next_query, min(term) AS term FROM b_only GROUP BY ALL HAVING count(*) = 1
)
SELECT a1.query, a1.next_query, a1.term AS term_from, b1.term AS term_to, p.pairs,
       coalesce(r1.status, '') AS status_from, coalesce(r2.status, '') AS status_to
FROM a1
JOIN b1 ON b1.query = a1.query AND b1.next_query = a1.next_query
JOIN p ON p.query = a1.query AND p.next_query = a1.next_query
LEFT JOIN review_queries r1 ON r1.review_id = $review_id AND r1.query = a1.query
LEFT JOIN review_queries r2 ON r2.review_id = $review_id AND r2.query = a1.next_query
ORDER BY a1.query, a1.next_query;

-- name: propose_contexts
-- Shared query contexts: an unmatched term of a failing query and a content term of an ok query
-- whose other terms are the same ("pay invoice" / "pay bill" share the context "pay").
-- A context held by more than $max_context_terms distinct (ok query, term) rows is left out: it
-- is too common to say which term replaces which, and joining it would pair every failing term
-- with every one of its terms (the join would grow with the square of the queries).
-- Reads review_queries, query_terms.
-- $review_id: the review
-- $index_id: the index the review scored against
-- $max_context_terms: most ok-query terms a shared context may hold
WITH qt AS (
    SELECT r.query, r.status, r.searches, t.term, t.df, t.in_best
    FROM review_queries r JOIN query_terms t ON t.index_id = $index_id AND t.query = r.query
    WHERE r.review_id = $review_id
), terms_of AS (
    -- each query's terms sorted, once (a query's terms are distinct in query_terms); a query of
    -- one term has no context
    SELECT query, list_sort(list(term)) AS terms FROM qt GROUP BY query HAVING count(*) > 1
), ctx AS (
    -- a term's context: its query's other terms. A list filter, not a self-join of qt grouped
    -- back per term: the same rows, 5.0 s -> 3.1 s at M
    SELECT a.query, a.status, a.searches, a.term, a.df, a.in_best,
           array_to_string(list_filter(q.terms, lambda x: x <> a.term), ' ') AS context
    FROM qt a JOIN terms_of q ON q.query = a.query
    -- only the rows the two sides below read: an ok query's content terms, a failing query's
    -- unmatched terms (9.4 s -> 6.9 s at M, where 77% of the queries fail)
    WHERE (a.status = 'ok' AND a.df > 0) OR (a.status <> 'ok' AND (a.df = 0 OR NOT a.in_best))
), ok_ctx AS (
    SELECT * FROM ctx WHERE status = 'ok' AND df > 0
    QUALIFY count(*) OVER (PARTITION BY context) <= $max_context_terms
)
SELECT f.term AS term_from, o.term AS term_to, count(DISTINCT f.context) AS contexts,
       min(f.query) AS query, min(o.query) AS other_query, sum(o.searches)::BIGINT AS other_searches
FROM ctx f JOIN ok_ctx o ON o.context = f.context AND o.term <> f.term
WHERE f.status <> 'ok' AND (f.df = 0 OR NOT f.in_best)
GROUP BY f.term, o.term
ORDER BY f.term, o.term;

-- name: propose_decisions
-- Every stored decision (a rejected one is never proposed again).
SELECT kind, term, replacement, direction, decision, review_id, decided_at, note FROM decisions;

-- name: propose_clear_examples
-- Forget an earlier run of the review's proposals (reruns replace, never add).
-- $review_id: the review
DELETE FROM proposal_examples WHERE review_id = $review_id;

-- name: propose_clear
-- $review_id: the review
DELETE FROM proposals WHERE review_id = $review_id;

-- name: propose_gap_pages
-- For each content-gap proposal, the pages that come closest for its example queries: score
-- summed over the queries, weighted by searches. Reads proposals, proposal_examples,
-- review_queries, query_top_pages, documents.
-- $review_id: the review
-- $index_id: the index the review scored against
SELECT e.proposal_id, p.doc_id, coalesce(d.title, '') AS title, coalesce(d.url, p.doc_id) AS url,
       sum(p.score * e.searches) AS weight
FROM proposals g
JOIN proposal_examples e ON e.review_id = g.review_id AND e.proposal_id = g.proposal_id
JOIN query_top_pages p ON p.index_id = $index_id AND p.query = e.query
LEFT JOIN documents d ON d.doc_id = p.doc_id
WHERE g.review_id = $review_id AND g.kind = 'content_gap'
GROUP BY ALL
ORDER BY e.proposal_id, weight DESC, p.doc_id;

-- name: propose_list
-- The stored proposals of a review, fixes first (most rescued), then gaps (most searched).
-- $review_id: the review
SELECT * FROM proposals WHERE review_id = $review_id ORDER BY proposal_id;

-- name: propose_example_texts
-- The example queries of a review's proposals, with the text visitors typed most for each.
-- $review_id: the review
SELECT e.proposal_id, e.query, e.other_query, e.searches, coalesce(r.example, e.query) AS example
FROM proposal_examples e
LEFT JOIN review_queries r ON r.review_id = e.review_id AND r.query = e.query
WHERE e.review_id = $review_id
ORDER BY e.proposal_id, e.searches DESC, e.query;

-- name: decide_upsert
-- Store one decision, replacing an earlier one on the same rule. Writes decisions.
-- $kind: spelling, synonym, variant or content_gap
-- $term: the term as the analyzer sees it
-- $replacement: the suggestion ('' for content gaps)
-- $direction: one-way or both-ways
-- $decision: accepted, rejected or parked
-- $review_id: the review the proposal came from, or NULL
-- $note: free text
INSERT OR REPLACE INTO decisions
VALUES ($kind, $term, $replacement, $direction, $decision, $review_id, now(), $note);

-- name: decide_find_proposal
-- The newest review that proposed a rule, with its searches and rescued figures.
-- $kind: the proposal's kind
-- $term: the term
-- $suggestion: the suggestion
SELECT p.review_id, p.searches, p.rescued FROM proposals p JOIN reviews r USING (review_id)
WHERE p.kind = $kind AND p.term = $term AND p.suggestion = $suggestion
ORDER BY r.window_start DESC;

-- name: propose_awaiting_check
-- Accepted decisions made before this review, with this review's searches of the term in failing
-- queries (a fix that worked should bring them down). Reads decisions, review_queries, query_terms.
-- $review_id: the review
-- $index_id: the index the review scored against
SELECT d.kind, d.term, d.replacement, d.review_id AS decided_in, d.decided_at,
       coalesce(sum(r.searches) FILTER (WHERE r.status <> 'ok'), 0)::BIGINT AS failing_searches,
       coalesce(sum(r.searches), 0)::BIGINT AS searches
FROM decisions d
LEFT JOIN query_terms t ON t.index_id = $index_id AND t.term = d.term
LEFT JOIN review_queries r ON r.review_id = $review_id AND r.query = t.query
WHERE d.decision = 'accepted' AND coalesce(d.review_id, '') <> $review_id
GROUP BY ALL
ORDER BY failing_searches DESC, d.term;

-- name: sessions_fill_simple
-- A stand-in for the session stage when search_sessions is empty: searches of one user (or
-- session key) with gaps under $gap_minutes minutes form a session (30 min: Catledge & Pitkow,
-- 1995); a session of at least $bot_searches searches whose median gap is under $bot_seconds
-- seconds is marked as a bot (common practice, no source). Writes search_sessions.
-- $gap_minutes: inactivity that ends a session
-- $bot_searches: searches a session needs before it can be a bot
-- $bot_seconds: median gap below which such a session is a bot
INSERT INTO search_sessions (file_id, line, session, is_bot)
WITH w AS (
    -- the visitor: the user key, else the session key (16 hex digits), else the search alone
    SELECT file_id, line, searched_at,
           coalesce(printf('%016x', coalesce(user_key, session_key)), 'row' || file_id || ':' || line)
               AS who
    FROM searches
), s AS (
    SELECT *, epoch(searched_at) - epoch(lag(searched_at) OVER (
                  PARTITION BY who ORDER BY searched_at, file_id, line)) AS gap
    FROM w
), n AS (
    SELECT *, sum(CASE WHEN gap IS NULL OR gap > $gap_minutes * 60 THEN 1 ELSE 0 END)
                  OVER (PARTITION BY who ORDER BY searched_at, file_id, line) AS k
    FROM s
), b AS (
    SELECT who, k, count(*) >= $bot_searches AND coalesce(median(gap) FILTER (WHERE gap <= $gap_minutes * 60), 1e9) < $bot_seconds AS is_bot
    FROM n GROUP BY who, k
)
SELECT n.file_id, n.line, dense_rank() OVER (ORDER BY n.who, n.k) - 1, b.is_bot
FROM n JOIN b ON b.who = n.who AND b.k = n.k;

-- name: steps_fill_simple
-- The steps of the stand-in sessions (see sql/schema/009_search_steps.sql): consecutive searches
-- of one session that is not a bot's, by time, file and line, whose queries differ, at most
-- $max_gap_us microseconds apart. Reads searches, search_sessions; writes search_steps.
-- $max_gap_us: longest step kept (querygap.sessions.STEP_GAP_SECONDS)
INSERT INTO search_steps
WITH s AS (
    SELECT x.file_id, x.line, x.query, epoch_us(x.searched_at) AS at_us, ss.session
    FROM searches x JOIN search_sessions ss ON ss.file_id = x.file_id AND ss.line = x.line
    WHERE NOT ss.is_bot
), seq AS (
    SELECT file_id, line, query, at_us,
           lead(file_id) OVER w AS next_file_id, lead(line) OVER w AS next_line,
           lead(query) OVER w AS next_query, lead(at_us) OVER w AS next_us
    FROM s WINDOW w AS (PARTITION BY session ORDER BY at_us, file_id, line)
)
SELECT file_id, line, next_file_id, next_line, at_us, next_us - at_us
FROM seq WHERE next_query IS NOT NULL AND next_query <> query AND next_us - at_us <= $max_gap_us;

-- name: sessions_count
-- Rows of search_sessions.
SELECT count(*) FROM search_sessions;
