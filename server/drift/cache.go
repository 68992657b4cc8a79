package drift

import (
	"container/list"
	"context"
	"fmt"
	"slices"
	"sync"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// refKey names a prepared baseline. A baseline version never changes once
// stored; the series' horizon, decision leads and error scale are part of
// the key because the pooled quantity and the scales depend on them.
type refKey struct {
	series   int64
	model    string
	version  int
	horizon  int
	decision string
	mode     scoring.ScaleMode
}

// refCache keeps the most recently used prepared baselines. Preparing one
// costs its rows' read and the bands of every window size, milliseconds
// for 48 leads; a replica keeps those of the series it judges.
type refCache struct {
	mu    sync.Mutex
	size  int
	order *list.List // of *refEntry, most recent first
	byKey map[refKey]*list.Element
}

type refEntry struct {
	key refKey
	ref *scoring.Reference
}

func newRefCache(size int) *refCache {
	return &refCache{size: size, order: list.New(), byKey: map[refKey]*list.Element{}}
}

func (c *refCache) get(k refKey) *scoring.Reference {
	c.mu.Lock()
	defer c.mu.Unlock()
	if el, ok := c.byKey[k]; ok {
		c.order.MoveToFront(el)
		return el.Value.(*refEntry).ref
	}
	return nil
}

func (c *refCache) put(k refKey, r *scoring.Reference) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if _, ok := c.byKey[k]; ok {
		return
	}
	c.byKey[k] = c.order.PushFront(&refEntry{k, r})
	for c.order.Len() > c.size {
		el := c.order.Back()
		c.order.Remove(el)
		delete(c.byKey, el.Value.(*refEntry).key)
	}
}

// reference returns the prepared baseline version of (se, model).
func (e *Evaluator) reference(ctx context.Context, se *store.Series, model string, version int) (*scoring.Reference, error) {
	dec := se.Decision()
	k := refKey{se.ID, model, version, se.Horizon, fmt.Sprint(dec), se.ErrorScale}
	if r := e.refs.get(k); r != nil {
		return r, nil
	}
	b, err := e.st.BaselineRows(ctx, se, model, version)
	if err != nil {
		return nil, err
	}
	r := scoring.NewReference(backtestPairs(b), scoring.ReferenceSpec{Horizon: se.Horizon, Decision: slices.Clone(dec),
		Window: scoring.DriftWindow, MASEScale: b.MASEScale, Mode: se.ErrorScale})
	e.refs.put(k, r)
	return r, nil
}

// backtestPairs flattens a stored baseline's per-lead rows.
func backtestPairs(b store.Baseline) []scoring.Pair {
	var out []scoring.Pair
	for _, l := range b.Leads {
		for i, o := range l.Origins {
			out = append(out, scoring.Pair{Origin: o, Lead: l.Lead, Forecast: l.Forecasts[i], Actual: l.Actuals[i]})
		}
	}
	return out
}
