-- 0006_form_keys (PostgreSQL): public form keys (scope "form"), a key meant to sit in a public web page, which may
-- only post single answers and assign new respondents. Same design as migrations/sqlite/0006_form_keys.sql: a form
-- key is stored as scope 'ingest' with form = 1 and the repository reads it back as scope "form". (PostgreSQL could
-- change the scope CHECK in place; the flag keeps both engines' api_keys tables column for column alike, which
-- `splitballot copy-to-postgres` relies on.)
-- Append-only: never edit this file once a database has applied it.

ALTER TABLE api_keys ADD COLUMN form smallint NOT NULL DEFAULT 0 CHECK (form IN (0, 1) AND (form = 0 OR scope = 'ingest'));
