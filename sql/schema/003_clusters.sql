-- querygap workspace schema, version 3: session traffic figures, bots kept out of a review, and
-- the clusters of a review's failing queries.

-- One row per session built by the session stage, with the rate figures the bot verdict rests on.
-- verdict: 'bot' (kept out of review rates), 'suspect' (between the two thresholds of a criterion;
-- counted, but reported) or 'human'.
CREATE TABLE session_traffic (
    session_id      VARCHAR PRIMARY KEY,
    actor_key       VARCHAR,              -- the user key, else the session key; NULL without either
    searches        BIGINT NOT NULL,
    first_at        TIMESTAMPTZ NOT NULL,
    last_at         TIMESTAMPTZ NOT NULL,
    peak_per_minute BIGINT NOT NULL,      -- most searches in any 60 s span of the session
    peak_per_hour   BIGINT NOT NULL,      -- most searches in any 3600 s span of the session
    median_gap_s    DOUBLE,               -- median seconds between consecutive searches; NULL for one
    verdict         VARCHAR NOT NULL
);

-- Searches of a review window left out of its rates because their session is a bot.
CREATE TABLE review_bots (
    review_id        VARCHAR PRIMARY KEY,
    bot_keys         BIGINT NOT NULL,     -- distinct actor keys with a bot session in the window
    bot_searches     BIGINT NOT NULL,
    suspect_keys     BIGINT NOT NULL,     -- ambiguous actors: counted in the rates, listed here
    suspect_searches BIGINT NOT NULL
);

-- Clusters of a review's failing (zero and low) queries that mean the same thing.
CREATE TABLE clusters (
    review_id         VARCHAR NOT NULL,
    cluster_id        INTEGER NOT NULL,   -- 1 = the most searched cluster of the review
    label             VARCHAR NOT NULL,   -- the cluster's most searched query
    searches          BIGINT NOT NULL,
    queries           BIGINT NOT NULL,
    examples          VARCHAR NOT NULL,   -- JSON list of the most searched member queries
    terms             VARCHAR NOT NULL,   -- JSON list of the members' unmatched terms, by searches
    previous_searches BIGINT,             -- the members' searches in the previous window; NULL
                                          -- when the workspace holds no search of that window
    change            BIGINT,             -- searches - previous_searches
    PRIMARY KEY (review_id, cluster_id)
);

CREATE TABLE cluster_members (
    review_id  VARCHAR NOT NULL,
    cluster_id INTEGER NOT NULL,
    query      VARCHAR NOT NULL,
    searches   BIGINT NOT NULL,
    key_term   VARCHAR,                   -- the unmatched term the query was blocked on
    PRIMARY KEY (review_id, query)
);
