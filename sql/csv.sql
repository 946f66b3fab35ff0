-- CSV cells formatted by DuckDB, in the format of querygap/safe_csv.py's write_csv (read its
-- module docstring): formula cells neutralised, fields quoted only when they must be.

-- name: csv_macros
-- Temporary macros for statements that build CSV lines (connection-local; nothing is stored).
-- csv_quoted(v): v in double quotes (inner ones doubled) when it holds a comma, a double quote,
-- a carriage return or a line feed, else v as it is; NULL becomes the empty cell.
-- csv_text(v, triggers): a text cell: a single quote in front when v starts with one of the
-- one-character strings in the list triggers (safe_csv.FORMULA_TRIGGERS), then csv_quoted.
-- csv_number(v): a number cell, written as DuckDB casts it to text; NULL becomes the empty cell.
-- csv_round(v, places): v rounded as numpy rounds (v * 10^places to the nearest integer, halves
-- to even, divided back), for cells that pandas' round() wrote before.
CREATE OR REPLACE TEMP MACRO csv_quoted(v) AS coalesce(
    CASE WHEN regexp_matches(v, '[",\r\n]') THEN '"' || replace(v, '"', '""') || '"' ELSE v END,
    '');
CREATE OR REPLACE TEMP MACRO csv_text(v, triggers) AS
    csv_quoted(CASE WHEN list_contains(triggers, left(v, 1)) THEN '''' || v ELSE v END);
CREATE OR REPLACE TEMP MACRO csv_number(v) AS coalesce(CAST(v AS VARCHAR), '');
CREATE OR REPLACE TEMP MACRO csv_round(v, places) AS
    round_even(v * pow(10.0, places), 0) / pow(10.0, places);
