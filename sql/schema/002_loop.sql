-- querygap workspace schema, version 2: tables shared by the session, proposal and check stages.

-- Sessions and bot marks of every search, rebuilt by the session stage. session_id is unique across
-- the workspace; is_bot marks machine traffic, kept out of rates but never deleted.
CREATE TABLE search_sessions (
    file_id    INTEGER NOT NULL,
    line       BIGINT NOT NULL,
    session_id VARCHAR NOT NULL,
    is_bot     BOOLEAN NOT NULL,
    PRIMARY KEY (file_id, line)
);

-- The owner's decisions on proposals: they outlive reviews. A rejected rule is not proposed again;
-- an accepted one is checked at the next reviews until a verdict is reached.
CREATE TABLE decisions (
    kind        VARCHAR NOT NULL,     -- spelling, synonym, variant or content_gap
    term        VARCHAR NOT NULL,
    replacement VARCHAR NOT NULL,     -- '' for content gaps
    direction   VARCHAR NOT NULL,     -- one-way or both-ways
    decision    VARCHAR NOT NULL,     -- accepted, rejected or parked
    review_id   VARCHAR,              -- the review the proposal came from
    decided_at  TIMESTAMPTZ NOT NULL,
    note        VARCHAR NOT NULL,
    PRIMARY KEY (kind, term, replacement)
);
