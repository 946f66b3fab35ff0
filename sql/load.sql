-- Load stage: from a file read into temp table stage_read (by querygap/logload.py) to searches.

-- name: stage_line_numbers
-- Give every row read its record number: the k-th row read (rowid k) is the k-th record number
-- that DuckDB did not reject. Reads stage_read and stage_bad_lines; writes temp table stage_lines.
-- $first: the record number of the first data row (2 with a header line, 1 without)
-- $total: rows read plus rows rejected by the reader
CREATE OR REPLACE TEMP TABLE stage_lines AS
WITH numbers AS (
    SELECT range AS line FROM range($first, $first + $total)
), good AS (
    SELECT line, row_number() OVER (ORDER BY line) - 1 AS k
    FROM numbers ANTI JOIN stage_bad_lines USING (line)
)
SELECT k, line FROM good;

-- name: stage_typed
-- Parse the raw text fields. Reads stage_raw (line, ts_raw, query_raw, session_raw, user_raw,
-- results_raw, clicks_raw, parse_error); writes temp table stage_typed with the first problem of
-- each row in problem_field / problem. Naive timestamps are read in the session's TimeZone.
-- $time_format: a strptime format for timestamps (used when $use_format)
-- $use_format: true to read timestamps with $time_format, false for ISO 8601 and epoch numbers
-- $max_query_chars: longer query texts are rejected
-- $future_slack_hours: timestamps later than now plus this many hours are rejected
-- $f_timestamp: the file's name for the timestamp field, for messages
-- $f_query: the file's name for the query field
-- $f_results: the file's name for the results field ('' when absent)
-- $f_clicks: the file's name for the clicks field ('' when absent)
CREATE OR REPLACE TEMP TABLE stage_typed AS
WITH parsed AS (
    SELECT
        line, ts_raw, query_raw, session_raw, user_raw, results_raw, clicks_raw, parse_error,
        CASE
            WHEN ts_raw IS NULL THEN NULL
            WHEN $use_format THEN try_strptime(trim(ts_raw), $time_format)::TIMESTAMPTZ
            WHEN regexp_full_match(trim(ts_raw), '[0-9]{9,10}(\.[0-9]+)?')
                THEN to_timestamp(try_cast(trim(ts_raw) AS DOUBLE))
            WHEN regexp_full_match(trim(ts_raw), '[0-9]{12,13}')
                THEN to_timestamp(try_cast(trim(ts_raw) AS DOUBLE) / 1000.0)
            ELSE try_cast(trim(ts_raw) AS TIMESTAMPTZ)
        END AS searched_at,
        CASE
            WHEN lower(trim(results_raw)) = 'true' THEN 1
            WHEN lower(trim(results_raw)) = 'false' THEN 0
            WHEN trim(results_raw) = '' THEN NULL
            -- whole numbers only: a cast would round 1.5 to 2 (3.0 is read as 3)
            WHEN regexp_full_match(trim(results_raw), '[+-]?[0-9]+(\.0*)?')
                THEN try_cast(regexp_replace(trim(results_raw), '\.0*$', '') AS BIGINT)
        END AS results,
        CASE
            WHEN lower(trim(clicks_raw)) = 'true' THEN 1
            WHEN lower(trim(clicks_raw)) = 'false' THEN 0
            WHEN trim(clicks_raw) = '' THEN NULL
            -- whole numbers only: a cast would round 1.5 to 2 (3.0 is read as 3)
            WHEN regexp_full_match(trim(clicks_raw), '[+-]?[0-9]+(\.0*)?')
                THEN try_cast(regexp_replace(trim(clicks_raw), '\.0*$', '') AS BIGINT)
        END AS clicks
    FROM stage_raw
)
SELECT
    *,
    CASE
        WHEN parse_error IS NOT NULL THEN '(line)'
        WHEN query_raw IS NULL OR trim(query_raw) = '' THEN $f_query
        WHEN length(query_raw) > $max_query_chars THEN $f_query
        WHEN ts_raw IS NULL OR trim(ts_raw) = '' THEN $f_timestamp
        WHEN searched_at IS NULL THEN $f_timestamp
        WHEN searched_at > now() + to_hours($future_slack_hours) THEN $f_timestamp
        WHEN results_raw IS NOT NULL AND trim(results_raw) <> '' AND results IS NULL THEN $f_results
        WHEN results < 0 THEN $f_results
        WHEN clicks_raw IS NOT NULL AND trim(clicks_raw) <> '' AND clicks IS NULL THEN $f_clicks
        WHEN clicks < 0 THEN $f_clicks
    END AS problem_field,
    CASE
        WHEN parse_error IS NOT NULL THEN parse_error
        WHEN query_raw IS NULL THEN 'the query is missing or empty'
        WHEN trim(query_raw) = '' THEN 'the query is empty'
        WHEN length(query_raw) > $max_query_chars
            THEN 'the query is ' || length(query_raw) || ' characters long (limit '
                 || $max_query_chars || ')'
        WHEN ts_raw IS NULL OR trim(ts_raw) = '' THEN 'the timestamp is missing'
        WHEN searched_at IS NULL
            THEN 'the timestamp ' || left(ts_raw, 40) || ' is not a date and time'
                 || CASE WHEN NOT $use_format
                         THEN ' (ISO 8601 or epoch seconds; pass --time-format otherwise)'
                         ELSE ' in the format ' || $time_format END
        WHEN searched_at > now() + to_hours($future_slack_hours)
            THEN 'the timestamp ' || left(ts_raw, 40) || ' is in the future'
        WHEN results_raw IS NOT NULL AND trim(results_raw) <> '' AND results IS NULL
            THEN 'the result count ' || left(results_raw, 40) || ' is not a whole number'
        WHEN results < 0 THEN 'the result count ' || results || ' is negative'
        WHEN clicks_raw IS NOT NULL AND trim(clicks_raw) <> '' AND clicks IS NULL
            THEN 'the click count ' || left(clicks_raw, 40) || ' is not a whole number'
        WHEN clicks < 0 THEN 'the click count ' || clicks || ' is negative'
    END AS problem
FROM parsed;

-- name: stage_query_texts
-- The distinct query texts of the rows that parsed; Python redacts and normalizes them.
SELECT DISTINCT query_raw FROM stage_typed WHERE problem IS NULL;

-- name: stage_keys
-- The distinct session and user keys of the rows that parsed; Python hashes them.
SELECT DISTINCT k FROM (
    SELECT session_raw AS k FROM stage_typed WHERE problem IS NULL
    UNION ALL
    SELECT user_raw FROM stage_typed WHERE problem IS NULL
) WHERE k IS NOT NULL;

-- name: stage_rows
-- The rows ready to store, with their fingerprint and occurrence number. Reads stage_typed,
-- stage_query_map (query_raw, query_text, query) and stage_key_map (k, hashed); writes temp
-- table stage_rows. A row's fingerprint hashes its instant, its keys and its redacted text; the
-- n-th row of a file with a given fingerprint is the same search as the n-th row with it in an
-- overlapping export.
-- $file_id: the log_files id of this file
CREATE OR REPLACE TEMP TABLE stage_rows AS
WITH rows AS (
    SELECT
        $file_id AS file_id, t.line, t.searched_at, m.query_text, m.query,
        s.hashed AS session_key, u.hashed AS user_key, t.results, t.clicks
    FROM stage_typed t
    JOIN stage_query_map m ON m.query_raw = t.query_raw
    LEFT JOIN stage_key_map s ON s.k = t.session_raw
    LEFT JOIN stage_key_map u ON u.k = t.user_raw
    WHERE t.problem IS NULL
), printed AS (
    SELECT *, md5_number_upper(
        epoch_us(searched_at)::VARCHAR || chr(31) || coalesce(session_key, '') || chr(31)
        || coalesce(user_key, '') || chr(31) || query_text
    ) AS fingerprint
    FROM rows
)
SELECT *, 1 AS occurrence FROM printed;

-- name: stage_number_repeats
-- Number the rows that share a fingerprint within the file (1, 2, ... in line order); every other
-- row keeps occurrence 1. Repeats are rare, so the window runs over few rows and a log of tens of
-- millions of rows stays within DuckDB's memory limit. Reads and writes temp table stage_rows.
UPDATE stage_rows SET occurrence = n.occurrence
FROM (
    SELECT line, row_number() OVER (PARTITION BY fingerprint ORDER BY line)::INTEGER AS occurrence
    FROM stage_rows
    WHERE fingerprint IN (
        SELECT fingerprint FROM stage_rows GROUP BY fingerprint HAVING count(*) > 1
    )
) n
WHERE stage_rows.line = n.line;

-- name: store_new_searches
-- Insert the staged rows that no loaded file already holds. Reads stage_rows; writes searches.
INSERT INTO searches
SELECT file_id, line, searched_at, query_text, query, session_key, user_key, results, clicks,
       fingerprint, occurrence
FROM stage_rows r
WHERE NOT EXISTS (
    SELECT 1 FROM searches s
    WHERE s.fingerprint = r.fingerprint AND s.occurrence = r.occurrence
);

-- name: store_duplicates
-- Record staged rows that an earlier file already holds. Reads stage_rows, searches; writes
-- duplicates. Runs before store_new_searches.
-- $file_id: the log_files id of this file
INSERT INTO duplicates
SELECT r.file_id, r.line, s.file_id, s.line
FROM stage_rows r
JOIN searches s ON s.fingerprint = r.fingerprint AND s.occurrence = r.occurrence
WHERE r.file_id = $file_id;

-- name: store_typed_rejects
-- Keep the rows that did not parse, with the field and the reason. Reads stage_typed; writes
-- rejects.
-- $file_id: the log_files id of this file
INSERT INTO rejects
SELECT $file_id, line, problem_field, problem, NULL
FROM stage_typed WHERE problem IS NOT NULL;

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
-- Counts of the staged file after storing. Reads stage_typed, stage_rows, duplicates.
-- $file_id: the log_files id of this file
SELECT
    (SELECT count(*) FROM stage_typed WHERE problem IS NULL) AS parsed,
    (SELECT count(*) FROM stage_typed WHERE problem IS NOT NULL) AS typed_rejects,
    (SELECT count(*) FROM duplicates WHERE file_id = $file_id) AS duplicates;
