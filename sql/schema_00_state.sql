-- The digest of the schema files (perfcheck.db.schema_digest) as they were when they last ran
-- on this database: perfcheck.db.connect runs them again only when their text changed.
CREATE TABLE IF NOT EXISTS schema_state (
    digest VARCHAR NOT NULL
);
