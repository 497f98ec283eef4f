-- Shot files as uploaded, kept beside the correlation dataset estimated
-- from them so the estimator can be re-run with other options.
CREATE TABLE shot_files (
    id           INTEGER PRIMARY KEY,
    session_id   INTEGER NOT NULL REFERENCES sessions(id),
    dataset_id   INTEGER NOT NULL REFERENCES datasets(id),
    name         TEXT NOT NULL,
    format       TEXT NOT NULL,
    bytes        BLOB NOT NULL,
    -- The estimator options given at upload (JSON), to re-run it.
    estimator    TEXT NOT NULL
);

CREATE INDEX shot_files_by_session ON shot_files(session_id, id);
