-- The initial trapwise schema, run unchanged on SQLite and PostgreSQL.
-- Only types that both backends decode through sqlx's Any driver: BIGINT, DOUBLE PRECISION,
-- TEXT. Times are BIGINT milliseconds since the Unix epoch, ids are UUID v7 text, JSON is TEXT.

-- Raw uploads, content-addressed: the bytes live in the blob directory under their SHA-256.
CREATE TABLE recordings (
    sha256 TEXT PRIMARY KEY,
    size_bytes BIGINT NOT NULL,
    created_at_ms BIGINT NOT NULL
);

-- One stored calibration of one upload. `idempotency_key` is the SHA-256 of the file hash, the
-- canonical run settings and the labels: a retried upload finds its calibration again.
CREATE TABLE calibrations (
    id TEXT PRIMARY KEY,
    lab TEXT NOT NULL,
    idempotency_key TEXT NOT NULL,
    instrument TEXT NOT NULL,
    trap TEXT NOT NULL,
    note TEXT NOT NULL,
    axes_labels_json TEXT NOT NULL,
    file_name TEXT NOT NULL,
    recording_sha256 TEXT NOT NULL REFERENCES recordings (sha256),
    settings_json TEXT NOT NULL,
    created_at_ms BIGINT NOT NULL,
    result_json TEXT NOT NULL,
    plots_json TEXT NOT NULL,
    UNIQUE (lab, idempotency_key)
);

CREATE INDEX calibrations_by_lab_time ON calibrations (lab, created_at_ms, id);
CREATE INDEX calibrations_by_trap_time ON calibrations (lab, instrument, trap, created_at_ms, id);

-- Bearer tokens: only the SHA-256 of the secret is kept. A token belongs to one lab.
CREATE TABLE tokens (
    id TEXT PRIMARY KEY,
    lab TEXT NOT NULL,
    secret_sha256 TEXT NOT NULL UNIQUE,
    created_at_ms BIGINT NOT NULL,
    revoked_at_ms BIGINT
);
