-- Content stage: staged pages (temp table stage_pages, filled by querygap/pageload.py) to
-- documents, with a record of what changed.

-- name: content_changes
-- How the staged pages compare with the stored ones of the same source.
-- Reads stage_pages, documents.
-- $source: the content source name
SELECT
    count(*) FILTER (WHERE d.doc_id IS NULL) AS added,
    count(*) FILTER (WHERE d.doc_id IS NOT NULL
                     AND (d.content_hash <> s.content_hash OR d.status <> 'present')) AS changed,
    count(*) FILTER (WHERE d.content_hash = s.content_hash AND d.status = 'present') AS unchanged,
    (SELECT count(*) FROM documents g
     WHERE g.source = $source AND g.status = 'present'
       AND g.doc_id NOT IN (SELECT doc_id FROM stage_pages)) AS gone
FROM stage_pages s LEFT JOIN documents d USING (doc_id);

-- name: content_upsert
-- Insert new pages, update changed ones (first_seen is kept). Reads stage_pages; writes documents.
INSERT INTO documents
SELECT doc_id, source, url, title, headings, body, content_hash, 'present', now(), now()
FROM stage_pages
ON CONFLICT (doc_id) DO UPDATE SET
    source = excluded.source, url = excluded.url, title = excluded.title,
    headings = excluded.headings, body = excluded.body, content_hash = excluded.content_hash,
    status = 'present', last_seen = now();

-- name: content_mark_gone
-- Pages of this source that the latest load did not find. Writes documents.
-- $source: the content source name
UPDATE documents SET status = 'gone'
WHERE source = $source AND status = 'present'
  AND doc_id NOT IN (SELECT doc_id FROM stage_pages);

-- name: content_record_load
-- $source: the content source name
-- $read: files or rows read
-- $added: new pages
-- $changed: pages whose text changed (or came back)
-- $unchanged: pages with the same text as before
-- $gone: pages no longer found
-- $rejected: files or rows not loaded
INSERT INTO content_loads VALUES ($source, now(), $read, $added, $changed, $unchanged, $gone, $rejected);

-- name: content_replace_boilerplate
-- Replace the boilerplate record of a source with the blocks found in this load.
-- $source: the content source name
DELETE FROM boilerplate WHERE source = $source;

-- name: content_present
-- Pages to index, in a stable order.
SELECT doc_id, title, headings, body, content_hash FROM documents
WHERE status = 'present' ORDER BY doc_id;
