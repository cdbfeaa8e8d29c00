-- Public form keys (scope "form"): a key meant to sit in a public web page, which may only post single answers and
-- assign new respondents. The scope column of api_keys keeps its CHECK (admin, ingest, read): changing a CHECK
-- constraint in SQLite means rebuilding the table, and dropping api_keys would set api_key_id to NULL in every
-- response, exclusion and look that names a key. A form key is therefore stored as scope 'ingest' with form = 1;
-- the repository reads it back as scope "form".
ALTER TABLE api_keys ADD COLUMN form INTEGER NOT NULL DEFAULT 0 CHECK (form IN (0, 1) AND (form = 0 OR scope = 'ingest'));
