-- Sessions, their access tokens and their datasets.
CREATE TABLE sessions (
    id          INTEGER PRIMARY KEY,
    name        TEXT NOT NULL,
    edit_token  TEXT NOT NULL UNIQUE,
    view_token  TEXT NOT NULL UNIQUE,
    created_at  TEXT NOT NULL
);

CREATE TABLE datasets (
    id            INTEGER PRIMARY KEY,
    session_id    INTEGER NOT NULL REFERENCES sessions(id),
    name          TEXT NOT NULL,
    format        TEXT NOT NULL,
    content_hash  TEXT NOT NULL,
    created_at    TEXT NOT NULL,
    meta_json     TEXT NOT NULL,
    notes_json    TEXT NOT NULL,
    -- The map: axes as JSON arrays, values/errors as little-endian f64
    -- blobs in row-major [time, site] order, the mask as one byte per point.
    offsets_json  TEXT NOT NULL,
    times_json    TEXT NOT NULL,
    values_blob   BLOB NOT NULL,
    errors_blob   BLOB,
    mask_blob     BLOB NOT NULL
);

CREATE INDEX datasets_by_session ON datasets(session_id, id);
