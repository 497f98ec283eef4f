-- The pinned session log. Entries are never rewritten or deleted: a
-- retraction is a new entry pointing at the old one. The triggers make the
-- database itself refuse any rewrite.
CREATE TABLE log_entries (
    id               INTEGER PRIMARY KEY,
    session_id       INTEGER NOT NULL REFERENCES sessions(id),
    created_at       TEXT NOT NULL,
    author           TEXT NOT NULL,
    comment          TEXT NOT NULL,
    dataset_id       INTEGER REFERENCES datasets(id),
    dataset_name     TEXT,
    dataset_hash     TEXT,
    retracts         INTEGER REFERENCES log_entries(id),
    fit_json         TEXT,
    program_version  TEXT NOT NULL
);

CREATE INDEX log_entries_by_session ON log_entries(session_id, id);

CREATE TRIGGER log_entries_never_updated BEFORE UPDATE ON log_entries
BEGIN
    SELECT RAISE(ABORT, 'log entries are never rewritten');
END;

CREATE TRIGGER log_entries_never_deleted BEFORE DELETE ON log_entries
BEGIN
    SELECT RAISE(ABORT, 'log entries are never deleted');
END;
