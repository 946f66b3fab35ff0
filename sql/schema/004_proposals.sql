-- querygap workspace schema, version 4: the proposal stage's tables.

-- Ranked fix proposals of a review, one row per (term, suggestion) candidate; rank 1 is the best
-- candidate for its term. rescued is measured: the affected queries re-scored with the fix applied.
CREATE TABLE proposals (
    review_id     VARCHAR NOT NULL,
    proposal_id   INTEGER NOT NULL,
    kind          VARCHAR NOT NULL,   -- spelling, synonym, variant or content_gap
    term          VARCHAR NOT NULL,   -- analyzed term (or short phrase) of the failing queries
    suggestion    VARCHAR NOT NULL,   -- '' for content gaps
    searches      BIGINT NOT NULL,    -- searches of the failing queries holding the term
    queries       BIGINT NOT NULL,    -- unique failing queries holding the term
    rescued       BIGINT NOT NULL,    -- of those searches, the ones whose query becomes ok
    confidence    DOUBLE NOT NULL,    -- 0 to 1, see querygap/proposals.py
    rank          INTEGER NOT NULL,   -- among the candidates for the same term, 1 = best
    evidence      VARCHAR NOT NULL,   -- readable summary
    evidence_json VARCHAR NOT NULL,   -- the same counts as JSON
    PRIMARY KEY (review_id, proposal_id)
);

-- The example queries behind each proposal: the failing query and, for behavioural evidence, the
-- query that followed it (or shared its context), with how many times the pair was seen.
CREATE TABLE proposal_examples (
    review_id   VARCHAR NOT NULL,
    proposal_id INTEGER NOT NULL,
    query       VARCHAR NOT NULL,
    other_query VARCHAR NOT NULL,   -- '' when there is none
    searches    BIGINT NOT NULL
);
