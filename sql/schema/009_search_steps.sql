-- querygap workspace schema, version 9: the steps of each session, kept by the session stage.
--
-- A step is two consecutive searches of one session that is not a bot's, with different query
-- texts, at most querygap.sessions.STEP_GAP_SECONDS apart: the raw material of reformulation
-- pairs (sql/propose.sql propose_substitutions). The session stage already walks every search
-- in session order, so it writes the steps on the way; the proposal stage then reads a few
-- thousand rows instead of sorting every search of the window by session again (that sort was
-- about 14 s of 20M searches). Consecutive means in the session stage's order: time, then file
-- and line. The table starts empty in a workspace made before version 9: every review rebuilds
-- its sessions (and so its steps) before it proposes.

CREATE TABLE search_steps (
    file_id      INTEGER NOT NULL,   -- the first search of the step
    line         BIGINT NOT NULL,
    next_file_id INTEGER NOT NULL,   -- the search that follows it in the same session
    next_line    BIGINT NOT NULL,
    searched_us  BIGINT NOT NULL,    -- the first search's time, microseconds since the epoch
    gap_us       BIGINT NOT NULL     -- microseconds from the first search to the next
);
