package store_test

import (
	"errors"
	"math"
	"reflect"
	"sync"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// A write with a request id keeps its acknowledgement: the same id and
// content is answered with it and applied no second time, whatever was
// stored meanwhile; the same id with other content is refused; an expired
// receipt no longer answers.
func TestReceiptsAnswerRetries(t *testing.T) {
	t.Parallel()
	pool := storetest.Pool(t)
	s := store.New(pool, store.Limits{})
	ctx := ctxT(t)
	mustSeries(t, s, "rc", "1h", 2)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	as := []store.Actual{{Series: "rc", Time: t0, Value: 1}, {Series: "rc", Time: t0.Add(time.Hour), Value: 2},
		{Series: "nope", Time: t0, Value: 3}}
	once := store.Once{ID: "run-1/actuals/0", Digest: []byte("d1")}
	first, err := s.WriteActualsOnce(ctx, once, as, 0)
	if err != nil || first.Accepted != 2 || first.Rejected != 1 || first.Replayed {
		t.Fatalf("first write: %+v %v", first, err)
	}
	again, err := s.WriteActualsOnce(ctx, once, as, 0)
	if err != nil || !again.Replayed {
		t.Fatalf("retry: %+v %v", again, err)
	}
	again.Replayed = false
	if !reflect.DeepEqual(again, first) {
		t.Errorf("retry answered %+v, want the first answer %+v", again, first)
	}
	if plain, err := s.WriteActuals(ctx, as[:2], 0); err != nil || plain.Duplicate != 2 {
		t.Errorf("without an id the same actuals are duplicates: %+v %v", plain, err)
	}

	other := store.Once{ID: once.ID, Digest: []byte("d2")}
	_, err = s.WriteActualsOnce(ctx, other, as[:1], 0)
	if ie, ok := errors.AsType[*store.InvalidError](err); !ok || ie.Violations[0].Field != "request_id" {
		t.Errorf("an id reused for other content: %v", err)
	}

	// Finish shapes what is kept: the receipt is the caller's answer.
	fOnce := store.Once{ID: "run-1/forecasts/0", Digest: []byte("f"), Finish: func(a store.Ack) store.Ack {
		a.Rejections = append(a.Rejections, store.Rejection{Index: 9, Field: "dense.values[0]", Reason: "made by the caller"})
		a.Rejected++
		return a
	}}
	vs := []store.ForecastVector{{Series: "rc", Model: "m", Origin: t0.Add(-time.Hour), Values: []float64{5, math.Inf(1)}}}
	fa, err := s.WriteForecastsOnce(ctx, fOnce, vs, 0)
	if err != nil || fa.Late != 1 || fa.Rejected != 1 {
		t.Fatalf("forecasts: %+v %v", fa, err)
	}
	vs[0].Values = []float64{5, math.Inf(1)} // the write marks what it rejected
	fr, err := s.WriteForecastsOnce(ctx, fOnce, vs, 0)
	if err != nil || !fr.Replayed || fr.Late != 1 || fr.Rejected != 2 || len(fr.Rejections) != 2 || fr.Rejections[1].Field != "dense.values[0]" {
		t.Errorf("forecast retry answered %+v %v, want the finished first answer", fr, err)
	}

	// A receipt past its day no longer answers: the id is free again.
	if _, err := pool.Exec(ctx, `UPDATE push_receipts SET created_at = created_at - interval '25 hours'`); err != nil {
		t.Fatal(err)
	}
	late, err := s.WriteActualsOnce(ctx, other, as[:1], 0)
	if err != nil || late.Replayed || late.Duplicate != 1 {
		t.Errorf("after expiry: %+v %v", late, err)
	}
	if _, err := s.WriteActualsOnce(ctx, store.Once{ID: string(make([]byte, 129))}, as, 0); err == nil {
		t.Error("an id of 129 bytes was kept")
	}
}

// Concurrent writes with the same id apply once: one is the first write,
// the others answer with its receipt.
func TestReceiptsUnderConcurrentRetries(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "cc", "1h", 2)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	as := make([]store.Actual, 50)
	for i := range as {
		as[i] = store.Actual{Series: "cc", Time: t0.Add(time.Duration(i) * time.Hour), Value: float64(i)}
	}
	once := store.Once{ID: "burst", Digest: []byte("same")}
	const n = 8
	acks := make([]store.Ack, n)
	errs := make([]error, n)
	var wg sync.WaitGroup
	for i := range n {
		wg.Go(func() { acks[i], errs[i] = s.WriteActualsOnce(ctx, once, as, 0) })
	}
	wg.Wait()
	applied := 0
	for i := range n {
		if errs[i] != nil {
			t.Fatalf("write %d: %v", i, errs[i])
		}
		if !acks[i].Replayed {
			applied++
		}
		if acks[i].Accepted != 50 || acks[i].Duplicate != 0 {
			t.Errorf("write %d answered %+v, want the first write's accepted 50", i, acks[i])
		}
	}
	if applied != 1 {
		t.Errorf("%d writes applied, want 1", applied)
	}
}
