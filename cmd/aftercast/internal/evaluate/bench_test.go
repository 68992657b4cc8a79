package evaluate

import (
	"bufio"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"runtime/metrics"
	"strconv"
	"sync"
	"testing"
	"time"
)

// benchFile writes (once per process) a sorted pairs file of rows rows:
// 8 series, hourly origins, 48 leads, in the layout a backtest export has.
func benchFile(b *testing.B, rows int) string {
	b.Helper()
	p := filepath.Join(os.TempDir(), fmt.Sprintf("aftercast-bench-%d.csv", rows))
	if st, err := os.Stat(p); err == nil && st.Size() > 0 {
		return p
	}
	f, err := os.Create(p + ".part")
	if err != nil {
		b.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	if _, err := w.WriteString(header); err != nil {
		b.Fatal(err)
	}
	r := rand.New(rand.NewPCG(1, 2))
	t0 := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	const series, leads = 8, 48
	perSeries := rows / (series * leads)
	var buf []byte
	for s := range series {
		for k := range perSeries {
			o := t0.Add(time.Duration(k) * time.Hour)
			for h := 1; h <= leads; h++ {
				y := 100 + 20*r.NormFloat64()
				buf = append(buf[:0], "substation-"...)
				buf = strconv.AppendInt(buf, int64(s), 10)
				buf = append(buf, ',')
				buf = o.AppendFormat(buf, time.RFC3339)
				buf = append(buf, ',')
				buf = o.Add(time.Duration(h)*time.Hour).AppendFormat(buf, time.RFC3339)
				buf = append(buf, ',')
				buf = strconv.AppendFloat(buf, y+r.NormFloat64()*float64(h)/8, 'f', 3, 64)
				buf = append(buf, ',')
				buf = strconv.AppendFloat(buf, y, 'f', 3, 64)
				buf = append(buf, '\n')
				if _, err := w.Write(buf); err != nil {
					b.Fatal(err)
				}
			}
		}
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	if err := f.Close(); err != nil {
		b.Fatal(err)
	}
	if err := os.Rename(p+".part", p); err != nil {
		b.Fatal(err)
	}
	return p
}

// peakHeap samples the live heap while f runs; runtime/metrics reads are
// cheap enough to poll without stopping the world.
func peakHeap(f func()) uint64 {
	s := []metrics.Sample{{Name: "/memory/classes/heap/objects:bytes"}}
	var (
		peak uint64
		mu   sync.Mutex
		done = make(chan struct{})
		wg   sync.WaitGroup
	)
	wg.Add(1)
	go func() {
		defer wg.Done()
		tick := time.NewTicker(5 * time.Millisecond)
		defer tick.Stop()
		for {
			metrics.Read(s)
			mu.Lock()
			peak = max(peak, s[0].Value.Uint64())
			mu.Unlock()
			select {
			case <-done:
				return
			case <-tick.C:
			}
		}
	}()
	f()
	close(done)
	wg.Wait()
	return peak
}

// BenchmarkEvaluateFile scores sorted pairs files of 1 and 10 million rows.
// rows/s is the throughput; peak-heap-MB should not grow with the file
// (streaming). Run on one core with -cpu 1. The 10M file is ~600 MB in the
// temp dir, written once and kept for re-runs.
func BenchmarkEvaluateFile(b *testing.B) {
	for _, rows := range []int{1_000_000, 10_000_000} {
		b.Run(fmt.Sprintf("rows=%d", rows), func(b *testing.B) {
			path := benchFile(b, rows)
			runtime.GC()
			b.ResetTimer()
			var peak uint64
			var n int64
			for b.Loop() {
				peak = max(peak, peakHeap(func() {
					rs, err := File(path, "", Options{Step: "1h"})
					if err != nil {
						b.Fatal(err)
					}
					n = 0
					for _, r := range rs {
						n += r.Table.Overall.N
					}
				}))
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
			b.ReportMetric(float64(peak)/(1<<20), "peak-heap-MB")
		})
	}
}
