-- Data arriving from the lab: idempotency keys of uploads, and the files of
-- a watched folder already taken in (or refused), so that a retried upload
-- or a restarted server never stores the same file twice.
CREATE TABLE upload_keys (
    session_id  INTEGER NOT NULL REFERENCES sessions(id),
    key         TEXT NOT NULL,
    dataset_id  INTEGER NOT NULL REFERENCES datasets(id),
    created_at  TEXT NOT NULL,
    PRIMARY KEY (session_id, key)
);

CREATE TABLE watched_files (
    id           INTEGER PRIMARY KEY,
    session_id   INTEGER NOT NULL REFERENCES sessions(id),
    name         TEXT NOT NULL,
    size         INTEGER NOT NULL,
    sha256       TEXT NOT NULL,
    -- The dataset made from the file, or NULL when it was refused.
    dataset_id   INTEGER REFERENCES datasets(id),
    -- The log entry that reported a refused file.
    log_id       INTEGER REFERENCES log_entries(id),
    seen_at      TEXT NOT NULL,
    UNIQUE (session_id, name, size, sha256)
);
