-- Load stage: from the reader's view stage_raw (made by querygap/logload.py) to searches.
-- Every pass over the rows is set-based; Python touches only the distinct query texts.

-- name: stage_typed
-- Read the file once and parse its text fields. Reads view stage_raw (blank, ts_raw, query_raw,
-- session_raw, user_raw, results_raw, clicks_raw, parse_error), which reads the file; writes temp
-- table stage_typed in file order (its rowid k is the k-th row the reader returned), with the
-- first problem of each row in problem_field / problem. Naive timestamps are read in the
-- session's TimeZone.
-- $time_format: a strptime format for timestamps (used when $use_format)
-- $use_format: true to read timestamps with $time_format, false for ISO 8601 and epoch numbers
-- $max_query_chars: longer query texts are rejected
-- $future_slack_hours: timestamps later than now plus this many hours are rejected
-- $f_timestamp: the file's name for the timestamp field, for messages
-- $f_query: the file's name for the query field
-- $f_results: the file's name for the results field ('' when absent)
-- $f_clicks: the file's name for the clicks field ('' when absent)
CREATE OR REPLACE TEMP TABLE stage_typed AS
WITH trimmed AS (
    SELECT
        blank, query_raw, session_raw, user_raw, parse_error, ts_raw, results_raw, clicks_raw,
        trim(ts_raw) AS ts, trim(results_raw) AS results_text, trim(clicks_raw) AS clicks_text
    FROM stage_raw
), parsed AS (
    SELECT
        *,
        CASE
            WHEN ts IS NULL THEN NULL
            WHEN $use_format THEN try_strptime(ts, $time_format)::TIMESTAMPTZ
            -- an epoch number has no '-'; most timestamps do, so they skip both patterns
            WHEN contains(ts, '-') THEN try_cast(ts AS TIMESTAMPTZ)
            WHEN regexp_full_match(ts, '[0-9]{9,10}(\.[0-9]+)?')
                THEN to_timestamp(try_cast(ts AS DOUBLE))
            WHEN regexp_full_match(ts, '[0-9]{12,13}')
                THEN to_timestamp(try_cast(ts AS DOUBLE) / 1000.0)
            ELSE try_cast(ts AS TIMESTAMPTZ)
        END AS searched_at,
        CASE
            -- whole numbers only: a cast would round 1.5 to 2 (3.0 is read as 3). Digits alone
            -- take the first branch, a cheaper pattern (3.1 s -> 1.5 s for both fields of 20M rows)
            WHEN results_text <> '' AND NOT regexp_matches(results_text, '[^0-9]')
                THEN try_cast(results_text AS BIGINT)
            WHEN regexp_full_match(results_text, '[+-]?[0-9]+(\.0*)?')
                THEN try_cast(regexp_replace(results_text, '\.0*$', '') AS BIGINT)
            WHEN lower(results_text) = 'true' THEN 1
            WHEN lower(results_text) = 'false' THEN 0
        END AS results,
        CASE
            WHEN clicks_text <> '' AND NOT regexp_matches(clicks_text, '[^0-9]')
                THEN try_cast(clicks_text AS BIGINT)
            WHEN regexp_full_match(clicks_text, '[+-]?[0-9]+(\.0*)?')
                THEN try_cast(regexp_replace(clicks_text, '\.0*$', '') AS BIGINT)
            WHEN lower(clicks_text) = 'true' THEN 1
            WHEN lower(clicks_text) = 'false' THEN 0
        END AS clicks
    FROM trimmed
), checked AS (
    -- the first problem of the row, as a number: each test runs once per row
    SELECT
        *,
        CASE
            WHEN parse_error IS NOT NULL THEN 1
            WHEN query_raw IS NULL THEN 2
            WHEN trim(query_raw) = '' THEN 3
            WHEN length(query_raw) > $max_query_chars THEN 4
            WHEN ts IS NULL OR ts = '' THEN 5
            WHEN searched_at IS NULL THEN 6
            WHEN searched_at > now() + to_hours($future_slack_hours) THEN 7
            WHEN results_text <> '' AND results IS NULL THEN 8
            WHEN results < 0 THEN 9
            WHEN clicks_text <> '' AND clicks IS NULL THEN 10
            WHEN clicks < 0 THEN 11
        END AS code
    FROM parsed
)
SELECT
    blank, searched_at, query_raw, session_raw, user_raw, results, clicks,
    CASE
        WHEN code = 1 THEN '(line)'
        WHEN code <= 4 THEN $f_query
        WHEN code <= 7 THEN $f_timestamp
        WHEN code <= 9 THEN $f_results
        WHEN code <= 11 THEN $f_clicks
    END AS problem_field,
    CASE code
        WHEN 1 THEN parse_error
        WHEN 2 THEN 'the query is missing or empty'
        WHEN 3 THEN 'the query is empty'
        WHEN 4 THEN 'the query is ' || length(query_raw) || ' characters long (limit '
                    || $max_query_chars || ')'
        WHEN 5 THEN 'the timestamp is missing'
        WHEN 6 THEN 'the timestamp ' || left(ts_raw, 40) || ' is not a date and time'
                    || CASE WHEN NOT $use_format
                            THEN ' (ISO 8601 or epoch seconds; pass --time-format otherwise)'
                            ELSE ' in the format ' || $time_format END
        WHEN 7 THEN 'the timestamp ' || left(ts_raw, 40) || ' is in the future'
        WHEN 8 THEN 'the result count ' || left(results_raw, 40) || ' is not a whole number'
        WHEN 9 THEN 'the result count ' || results || ' is negative'
        WHEN 10 THEN 'the click count ' || left(clicks_raw, 40) || ' is not a whole number'
        WHEN 11 THEN 'the click count ' || clicks || ' is negative'
    END AS problem
FROM checked;

-- name: stage_read_counts
-- Rows the reader returned, and how many of them were blank lines (JSON Lines only).
SELECT count(*) AS returned, count(*) FILTER (WHERE blank) AS blank FROM stage_typed;

-- name: stage_numbered_in_order
-- Record numbers when the reader rejected no line: the k-th row read is record first + k.
-- Reads stage_typed and the variable qg_first_line (the first data record number); writes temp
-- view stage_numbered (line and the columns of stage_typed, blank lines left out).
CREATE OR REPLACE TEMP VIEW stage_numbered AS
SELECT rowid + getvariable('qg_first_line') AS line, * EXCLUDE (blank)
FROM stage_typed
WHERE NOT blank;

-- name: stage_line_shift
-- Where the reader's rejected lines shift the record numbers: with the rejected lines b_0 < b_1
-- < ... in the record range, g_i = b_i - first - i rows were read before b_i, so the k-th row read
-- is record first + k + (the number of i with g_i <= k). Reads stage_bad_lines; writes temp
-- table stage_line_shift (g, shift), one row per g with the count of rejected lines up to it.
-- $first: the record number of the first data row (2 with a header line, 1 without)
-- $total: rows read plus rows rejected by the reader
CREATE OR REPLACE TEMP TABLE stage_line_shift AS
SELECT g, max(i) + 1 AS shift
FROM (
    SELECT line - $first - i AS g, i
    FROM (
        SELECT line, row_number() OVER (ORDER BY line) - 1 AS i
        FROM stage_bad_lines
        WHERE line >= $first AND line < $first + $total
    )
)
GROUP BY g;

-- name: stage_numbered_around_rejects
-- Record numbers when the reader rejected lines: first + k plus the shift of the last g <= k.
-- Reads stage_typed, stage_line_shift and the variable qg_first_line; writes temp view
-- stage_numbered as stage_numbered_in_order does.
CREATE OR REPLACE TEMP VIEW stage_numbered AS
SELECT t.rowid + getvariable('qg_first_line') + coalesce(s.shift, 0) AS line, t.* EXCLUDE (blank)
FROM stage_typed t ASOF LEFT JOIN stage_line_shift s ON t.rowid >= s.g
WHERE NOT t.blank;

-- name: stage_query_texts
-- The distinct query texts of the rows that parsed; Python redacts and normalizes them.
SELECT DISTINCT query_raw FROM stage_typed WHERE problem IS NULL AND NOT blank;

-- name: stage_key_map
-- Pseudonymise each distinct session and user key of the rows that parsed, once, with
-- HMAC-SHA256 (RFC 2104): H((K' xor opad) || H((K' xor ipad) || key)), key as UTF-8, the first
-- 16 hex digits kept (as the UBIGINT they spell); the same value as
-- querygap.redaction.keyed_hash_series. Reads stage_typed; writes temp table stage_key_map (k,
-- hashed).
-- $inner_pad: K' xor ipad, 64 bytes (querygap.redaction.hmac_pads)
-- $outer_pad: K' xor opad, 64 bytes
CREATE OR REPLACE TEMP TABLE stage_key_map AS
SELECT k,
       ('0x' || left(sha256($outer_pad || unhex(sha256($inner_pad || encode(k)))), 16))::UBIGINT
           AS hashed
FROM (
    SELECT session_raw AS k FROM stage_typed WHERE problem IS NULL AND NOT blank
    UNION
    SELECT user_raw FROM stage_typed WHERE problem IS NULL AND NOT blank
)
WHERE k IS NOT NULL;

-- name: store_new_searches
-- Insert every row that parsed, without a fingerprint and with occurrence 1; stage_fingerprints
-- and store_fingerprints give the rows that another file could also hold theirs, in the same
-- transaction. Reads stage_numbered, stage_query_map (query_raw, query_text, query) and
-- stage_key_map (k, hashed); writes searches.
-- $file_id: the log_files id of this file
INSERT INTO searches
SELECT
    $file_id, t.line, t.searched_at, m.query_text, m.query, s.hashed, u.hashed, t.results,
    t.clicks, NULL, 1
FROM stage_numbered t
JOIN stage_query_map m ON m.query_raw = t.query_raw
LEFT JOIN stage_key_map s ON s.k = t.session_raw
LEFT JOIN stage_key_map u ON u.k = t.user_raw
WHERE t.problem IS NULL;

-- name: stage_fingerprints
-- Fingerprint the searches, of any file, that have none yet and whose instant lies both within
-- this file's first and last and within the other files' first and last: only those can be a
-- search two overlapping exports share. A fingerprint hashes a search's instant, keys and
-- redacted text; the n-th row of a file with a given fingerprint is the same search as the n-th
-- row with it in another file. A weekly file that overlaps no other is never fingerprinted (at
-- 20M searches the hashing took about 12 s of the load). Rows with one fingerprint share their
-- instant, so a file's rows with one fingerprint are all fingerprinted in the same pass, and
-- numbered 1, 2, ... in line order by stage_number_repeats. Reads searches; writes temp table
-- stage_fingerprints (file_id, line, fingerprint, occurrence 1).
-- $file_id: the log_files id of this file
CREATE OR REPLACE TEMP TABLE stage_fingerprints AS
WITH mine AS (
    SELECT min(searched_at) AS lo, max(searched_at) AS hi FROM searches WHERE file_id = $file_id
), others AS (
    SELECT min(searched_at) AS lo, max(searched_at) AS hi FROM searches WHERE file_id <> $file_id
), span AS (
    -- empty (lo > hi, or NULL) when the spans do not overlap or either file has no rows
    SELECT CASE WHEN mine.lo > others.lo THEN mine.lo ELSE others.lo END AS lo,
           CASE WHEN mine.hi < others.hi THEN mine.hi ELSE others.hi END AS hi
    FROM mine, others
), todo AS (
    SELECT
        s.file_id, s.line,
        -- md5_number_upper of epoch_us, keys (16 hex digits) and text joined by chr(31); its
        -- macro goes through a bit string, 6x slower than the mask
        (md5_number(concat_ws(
            chr(31), epoch_us(s.searched_at), coalesce(printf('%016x', s.session_key), ''),
            coalesce(printf('%016x', s.user_key), ''), s.query_text
        )) & 18446744073709551615::UHUGEINT)::UBIGINT AS fingerprint
    FROM searches s, span
    WHERE s.fingerprint IS NULL AND s.searched_at >= span.lo AND s.searched_at <= span.hi
)
SELECT file_id, line, fingerprint, 1 AS occurrence FROM todo;

-- name: stage_number_repeats
-- Number the rows of stage_fingerprints of one file that share a fingerprint 1, 2, ... in line
-- order; every other row keeps occurrence 1. Repeats are rare, so the window runs over few rows.
-- Reads and writes stage_fingerprints.
UPDATE stage_fingerprints SET occurrence = n.occurrence
FROM (
    SELECT f.file_id, f.line,
           row_number() OVER (PARTITION BY f.file_id, f.fingerprint ORDER BY f.line)::INTEGER
               AS occurrence
    FROM stage_fingerprints f
    SEMI JOIN (
        SELECT file_id, fingerprint FROM stage_fingerprints
        GROUP BY file_id, fingerprint HAVING count(*) > 1
    ) r ON r.file_id = f.file_id AND r.fingerprint = f.fingerprint
) n
WHERE stage_fingerprints.file_id = n.file_id AND stage_fingerprints.line = n.line;

-- name: store_fingerprints
-- Store the fingerprints and occurrences of stage_fingerprints. Reads stage_fingerprints; writes
-- searches.
UPDATE searches SET fingerprint = f.fingerprint, occurrence = f.occurrence
FROM stage_fingerprints f
WHERE searches.file_id = f.file_id AND searches.line = f.line;

-- name: store_duplicates
-- Record this file's rows that an earlier file already holds (same fingerprint and occurrence).
-- Reads searches; writes duplicates. Runs after store_fingerprints.
-- $file_id: the log_files id of this file
INSERT INTO duplicates
SELECT r.file_id, r.line, s.file_id, s.line
FROM searches r
JOIN searches s ON s.fingerprint = r.fingerprint AND s.occurrence = r.occurrence
WHERE r.file_id = $file_id AND s.file_id <> $file_id;

-- name: drop_duplicate_searches
-- Remove this file's rows that store_duplicates found in an earlier file. Reads duplicates;
-- writes searches.
-- $file_id: the log_files id of this file
DELETE FROM searches
WHERE file_id = $file_id AND line IN (SELECT line FROM duplicates WHERE file_id = $file_id);

-- name: store_typed_rejects
-- Keep the rows that did not parse, with the field and the reason. Reads stage_numbered; writes
-- rejects.
-- $file_id: the log_files id of this file
INSERT INTO rejects
SELECT $file_id, line, problem_field, problem, NULL
FROM stage_numbered WHERE problem IS NOT NULL;

-- name: file_by_hash
-- The file already loaded with these bytes, if any.
-- $sha256: hex SHA-256 of the file
SELECT file_id, path, loaded_at FROM log_files WHERE sha256 = $sha256;

-- name: next_file_id
SELECT coalesce(max(file_id), 0) + 1 FROM log_files;

-- name: insert_log_file
-- Record a loaded file and its reconciliation.
-- $file_id: the new id
-- $path: the path as given
-- $sha256: hex SHA-256 of the bytes
-- $format: csv, tsv, jsonl or parquet
-- $columns_used: JSON mapping of our fields to the file's columns
-- $time_zone: zone applied to naive timestamps
-- $redacted: whether personal data was redacted
-- $rows_read: data rows in the file
-- $rows_loaded: rows stored in searches
-- $rows_rejected: rows stored in rejects
-- $rows_duplicate: rows already held from another file
INSERT INTO log_files VALUES (
    $file_id, $path, $sha256, $format, $columns_used, $time_zone, $redacted, $rows_read,
    $rows_loaded, $rows_rejected, $rows_duplicate, now()
);

-- name: load_counts
-- Counts of the staged file after storing. Reads stage_typed, duplicates.
-- $file_id: the log_files id of this file
SELECT
    (SELECT count(*) FROM stage_typed WHERE problem IS NULL AND NOT blank) AS parsed,
    (SELECT count(*) FROM stage_typed WHERE problem IS NOT NULL AND NOT blank) AS typed_rejects,
    (SELECT count(*) FROM duplicates WHERE file_id = $file_id) AS duplicates;
