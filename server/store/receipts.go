package store

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
)

// Once makes a write idempotent across retries of the request that carried
// it. Ingestion is idempotent already — what is stored again counts as a
// duplicate — but a client whose acknowledgement was lost cannot tell what
// its first attempt did. With an id, the first write keeps a receipt (its
// acknowledgement) in the same transaction, and a write with the same id
// and content returns that receipt instead of being applied again, so a
// retried push reports what it did, not a page of duplicates.
type Once struct {
	// ID is chosen by the client; empty: no receipt.
	ID string
	// Digest identifies the request's content: an id reused for other
	// content is refused rather than answered with another's receipt.
	Digest []byte
	// Finish turns the store's acknowledgement into the one the client
	// receives (rejections the caller made before the store, field paths
	// as sent, lists capped), which is what the receipt keeps.
	Finish func(Ack) Ack
}

// ReceiptTTL is how long a receipt answers a retry.
const ReceiptTTL = 24 * time.Hour

// MaxRequestID bounds the length of a request id, in bytes.
const MaxRequestID = 128

// errReceiptTaken aborts a write whose id another transaction committed a
// receipt for meanwhile: that receipt is the answer.
var errReceiptTaken = errors.New("receipt taken")

// checkOnce refuses an id that cannot be kept.
func checkOnce(once Once) error {
	if len(once.ID) > MaxRequestID {
		return invalid("request_id", "at most %d bytes, got %d", MaxRequestID, len(once.ID))
	}
	return nil
}

// receipt is the acknowledgement kept for once.ID, marked Replayed; ok is
// false when there is none younger than ReceiptTTL.
func (s *Store) receipt(ctx context.Context, once Once) (ack Ack, ok bool, err error) {
	var digest, raw []byte
	err = s.pool.QueryRow(ctx, `SELECT digest, ack FROM push_receipts WHERE id = $1 AND created_at > now() - $2::interval`,
		once.ID, ReceiptTTL).Scan(&digest, &raw)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		return Ack{}, false, nil
	case err != nil:
		return Ack{}, false, fmt.Errorf("reading the receipt of request %q: %w", once.ID, err)
	case !bytes.Equal(digest, once.Digest):
		return Ack{}, false, invalid("request_id", "%q was used in the last %.0f hours for a request with other content: "+
			"a retry must send the same content; new content needs a new id", once.ID, ReceiptTTL.Hours())
	}
	if err := json.Unmarshal(raw, &ack); err != nil {
		return Ack{}, false, fmt.Errorf("decoding the receipt of request %q: %w", once.ID, err)
	}
	ack.Replayed = true
	return ack, true, nil
}

// replay answers a write whose id has a receipt; ok is false when it has
// none and the write is to be applied.
func (s *Store) replay(ctx context.Context, once Once) (Ack, bool, error) {
	if once.ID == "" {
		return Ack{}, false, nil
	}
	if err := checkOnce(once); err != nil {
		return Ack{}, false, err
	}
	return s.receipt(ctx, once)
}

// saveReceipt keeps the finished acknowledgement of a write, in its
// transaction. A receipt older than ReceiptTTL is replaced; a younger one
// means a concurrent write with the same id committed first.
func saveReceipt(ctx context.Context, tx pgx.Tx, once Once, ack Ack) error {
	if once.ID == "" {
		return nil
	}
	if once.Finish != nil {
		ack = once.Finish(ack)
	}
	raw, err := json.Marshal(ack)
	if err != nil {
		return fmt.Errorf("encoding a receipt: %w", err)
	}
	tag, err := tx.Exec(ctx, `INSERT INTO push_receipts (id, digest, ack) VALUES ($1, $2, $3)
		ON CONFLICT (id) DO UPDATE SET digest = excluded.digest, ack = excluded.ack, created_at = excluded.created_at
		WHERE push_receipts.created_at <= now() - $4::interval`, once.ID, once.Digest, raw, ReceiptTTL)
	if err != nil {
		return fmt.Errorf("keeping a receipt: %w", err)
	}
	if tag.RowsAffected() == 0 {
		return errReceiptTaken
	}
	return nil
}

// afterWrite settles a write that carried once: when a concurrent write
// with the same id won, its receipt is the answer. It also drops expired
// receipts now and then.
func (s *Store) afterWrite(ctx context.Context, once Once, ack Ack, err error) (Ack, error) {
	if once.ID == "" {
		return ack, err
	}
	if errors.Is(err, errReceiptTaken) {
		won, ok, err := s.receipt(ctx, once)
		if err == nil && !ok {
			err = errors.New("a concurrent write kept a receipt that cannot be read back")
		}
		return won, err
	}
	if err == nil {
		s.dropExpiredReceipts(ctx)
	}
	return ack, err
}

// dropExpiredReceipts deletes receipts past ReceiptTTL, at most every few
// minutes and outside the writes' transactions, so that writers never wait
// on each other's sweeps. A failure is left for the next sweep.
func (s *Store) dropExpiredReceipts(ctx context.Context) {
	now := time.Now().Unix()
	last := s.receiptsSwept.Load()
	if now-last < 300 || !s.receiptsSwept.CompareAndSwap(last, now) {
		return
	}
	_, _ = s.pool.Exec(ctx, `DELETE FROM push_receipts WHERE created_at <= now() - $1::interval`, ReceiptTTL)
}
