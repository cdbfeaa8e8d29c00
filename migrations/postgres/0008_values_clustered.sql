-- 0008_values_clustered (PostgreSQL): nothing to change. The SQLite migration of the same number changes only how
-- the embedded engine lays response_values out on disk (one B-tree clustered in comparison order) and adds a packed
-- copy of each response's values that only that layout needs; the copy is the embedded engine's own and is not
-- exported to PostgreSQL. PostgreSQL keeps its heap table and its index. The file exists so that both engines carry
-- the same migration numbers.
-- Append-only: never edit this file once a database has applied it.

SELECT 1;
