-- What a write that carried a client-chosen request id did, kept for a day
-- so that a retry of it (same id, same content) is answered with the
-- original acknowledgement instead of being applied again.
CREATE TABLE push_receipts (
    id text COLLATE "C" PRIMARY KEY,
    digest bytea NOT NULL,
    ack jsonb NOT NULL,
    created_at timestamptz NOT NULL DEFAULT now()
);
CREATE INDEX push_receipts_created_at ON push_receipts (created_at);
