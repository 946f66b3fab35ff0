-- querygap workspace schema, version 5: the check stage (simulate a rules file; observe a change).

-- One row per simulation: a rules file applied to the unique queries of a review.
CREATE TABLE simulations (
    simulation_id VARCHAR PRIMARY KEY,   -- review id, rules file hash and rule selection
    review_id     VARCHAR NOT NULL,
    index_id      VARCHAR NOT NULL,
    rules_file    VARCHAR NOT NULL,
    rules_sha256  VARCHAR NOT NULL,
    not_rejected  BOOLEAN NOT NULL,      -- true: every rule not rejected; false: accepted only
    score_margin  DOUBLE NOT NULL,       -- a fall of the best cosine above this is a regression
    created_at    TIMESTAMPTZ NOT NULL
);

-- Every query a simulation changed, before and after the rules.
CREATE TABLE simulation_queries (
    simulation_id VARCHAR NOT NULL,
    query         VARCHAR NOT NULL,
    rewritten     VARCHAR NOT NULL,      -- analyzer terms after the rules
    searches      BIGINT NOT NULL,
    rules         VARCHAR NOT NULL,      -- line numbers of the rules that touched it, e.g. '3 7'
    before_status VARCHAR NOT NULL,
    before_score  DOUBLE NOT NULL,
    before_page   VARCHAR,
    after_status  VARCHAR NOT NULL,
    after_score   DOUBLE NOT NULL,
    after_coverage DOUBLE NOT NULL,
    after_page    VARCHAR,
    outcome       VARCHAR NOT NULL,      -- fixed, still failing, newly failing, regressed, unchanged
    PRIMARY KEY (simulation_id, query)
);

-- Per rule of a simulation: changed queries and their searches by outcome.
CREATE TABLE simulation_rules (
    simulation_id          VARCHAR NOT NULL,
    line                   INTEGER NOT NULL,   -- the rule's line in the rules file
    kind                   VARCHAR NOT NULL,
    term                   VARCHAR NOT NULL,
    replacement            VARCHAR NOT NULL,
    direction              VARCHAR NOT NULL,
    status                 VARCHAR NOT NULL,
    effect                 VARCHAR NOT NULL,   -- applied, matched no query, no effect
    queries                BIGINT NOT NULL,
    searches               BIGINT NOT NULL,
    fixed_queries          BIGINT NOT NULL,
    fixed_searches         BIGINT NOT NULL,
    still_failing_queries  BIGINT NOT NULL,
    still_failing_searches BIGINT NOT NULL,
    newly_failing_queries  BIGINT NOT NULL,
    newly_failing_searches BIGINT NOT NULL,
    regressed_queries      BIGINT NOT NULL,
    regressed_searches     BIGINT NOT NULL,
    unchanged_queries      BIGINT NOT NULL,
    unchanged_searches     BIGINT NOT NULL,
    PRIMARY KEY (simulation_id, line)
);

-- One row per observation: a window before a change against one after it.
CREATE TABLE observations (
    observation_id VARCHAR PRIMARY KEY,
    change_at      TIMESTAMPTZ NOT NULL,
    before_start   TIMESTAMPTZ NOT NULL,
    before_end     TIMESTAMPTZ NOT NULL,   -- exclusive
    after_start    TIMESTAMPTZ NOT NULL,
    after_end      TIMESTAMPTZ NOT NULL,   -- exclusive
    rules_file     VARCHAR NOT NULL,       -- '' when the rules came from table decisions
    bot_searches   BIGINT NOT NULL,        -- left out of every rate
    warnings       VARCHAR NOT NULL,
    created_at     TIMESTAMPTZ NOT NULL
);

-- Per rule of an observation (scope 'rule'), plus all searches (scope 'all') and the searches no
-- rule targets (scope 'not targeted', the control group): counts, rates and the verdict.
CREATE TABLE observation_rules (
    observation_id        VARCHAR NOT NULL,
    scope                 VARCHAR NOT NULL,
    line                  INTEGER NOT NULL,   -- the rule's line; 0 for the other scopes
    kind                  VARCHAR NOT NULL,
    term                  VARCHAR NOT NULL,
    replacement           VARCHAR NOT NULL,
    before_searches       BIGINT NOT NULL,
    after_searches        BIGINT NOT NULL,
    before_engine         BIGINT NOT NULL,    -- searches whose log row has a result count
    before_empty          BIGINT NOT NULL,    -- of those, with no results
    after_engine          BIGINT NOT NULL,
    after_empty           BIGINT NOT NULL,
    before_click_rows     BIGINT NOT NULL,    -- searches whose log row has a click count
    before_clicked        BIGINT NOT NULL,
    after_click_rows      BIGINT NOT NULL,
    after_clicked         BIGINT NOT NULL,
    before_content_failing BIGINT NOT NULL,   -- searches whose query scores zero or low
    after_content_failing BIGINT NOT NULL,
    failure_before        DOUBLE,             -- engine failure rate, before_empty / before_engine
    failure_after         DOUBLE,
    difference            DOUBLE,             -- after minus before
    newcombe_lower        DOUBLE,
    newcombe_upper        DOUBLE,
    p_value               DOUBLE,
    test                  VARCHAR NOT NULL,   -- z (pooled two-proportion), exact (Fisher), none
    verdict               VARCHAR NOT NULL,   -- fixed, not fixed, not enough data
    reason                VARCHAR NOT NULL,
    PRIMARY KEY (observation_id, scope, line)
);

-- Accepted decisions observed at a review: the change is taken to be live from decided_at.
CREATE TABLE decision_checks (
    review_id      VARCHAR NOT NULL,
    kind           VARCHAR NOT NULL,
    term           VARCHAR NOT NULL,
    replacement    VARCHAR NOT NULL,
    decided_at     TIMESTAMPTZ NOT NULL,
    before_start   TIMESTAMPTZ NOT NULL,
    before_end     TIMESTAMPTZ NOT NULL,
    after_start    TIMESTAMPTZ NOT NULL,
    after_end      TIMESTAMPTZ NOT NULL,
    before_searches BIGINT NOT NULL,
    after_searches BIGINT NOT NULL,
    failure_before DOUBLE,
    failure_after  DOUBLE,
    difference     DOUBLE,
    newcombe_lower DOUBLE,
    newcombe_upper DOUBLE,
    p_value        DOUBLE,
    verdict        VARCHAR NOT NULL,
    reason         VARCHAR NOT NULL,
    checked_at     TIMESTAMPTZ NOT NULL,
    PRIMARY KEY (review_id, kind, term, replacement)
);
