-- querygap workspace schema, version 11: a search's fingerprint may be NULL.
--
-- The fingerprint (with occurrence) recognises a search that two overlapping exports both hold.
-- Until version 10 every search was fingerprinted as it was stored; at 20M searches the hashing
-- took about 12 s of a 64 s load, and a weekly export that overlaps no other never needs it.
-- Now a load fingerprints only the searches, of any file, whose instants lie in the span that
-- the new file and the other files share (sql/load.sql stage_fingerprints); the others keep
-- NULL, and occurrence 1, until a later file overlaps them. Fingerprints already stored stay.
ALTER TABLE searches ALTER COLUMN fingerprint DROP NOT NULL;
