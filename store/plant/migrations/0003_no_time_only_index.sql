-- 0003: drop the index on plant time alone. With it, the planner read a
-- variant's latest runs by walking every run backwards in time and
-- filtering by variant (ten times the rows on a plant of ten variants);
-- without it, it walks the (variant_id, at) index. Queries by time alone
-- are rare and read the month partitions they need.
DROP INDEX runs_at;
