package store

import (
	"fmt"
	"math"
	"path/filepath"
	"sync/atomic"
	"testing"
	"time"
)

// Sinks keep the compiler from discarding results.
var (
	sinkBlock  Block
	sinkBlocks []Block
)

const benchBlocks = 16

// benchDB opens a file database in b.TempDir() with one site, one target and
// benchBlocks blocks that never fill up.
func benchDB(b *testing.B, synchronous string) *DB {
	b.Helper()
	db, err := Open(filepath.Join(b.TempDir(), "bench.db"), Options{synchronous: synchronous})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { _ = db.Close() })
	ctx := b.Context()
	if _, err := db.CreateSite(ctx, Site{ID: "s", Name: "s", Spec: make([]byte, 512)}); err != nil {
		b.Fatal(err)
	}
	if _, err := db.CreateTarget(ctx, Target{ID: "t", Name: "t", Kind: KindFixed, Spec: make([]byte, 64)}); err != nil {
		b.Fatal(err)
	}
	bs := make([]Block, benchBlocks)
	for i := range bs {
		bs[i] = Block{ID: fmt.Sprint("b", i), SiteID: "s", TargetID: "t", Priority: 1, FramesWanted: math.MaxInt32, Spec: make([]byte, 200)}
	}
	if _, err := db.CreateBlocks(ctx, bs); err != nil {
		b.Fatal(err)
	}
	return db
}

var benchT0 = time.Date(2031, 2, 3, 4, 5, 6, 0, time.UTC)

func benchReport(n int64) ProgressReport {
	return ProgressReport{ReportID: fmt.Sprint("r", n), BlockID: fmt.Sprint("b", n%benchBlocks), FramesKept: 1,
		Start: benchT0, End: benchT0.Add(time.Minute), Outcome: "ok"}
}

// BenchmarkReportProgress measures one progress report per op on a file
// database: new reports with synchronous=FULL (the setting Open uses) one
// caller at a time and from 4*GOMAXPROCS callers at once, the same with
// synchronous=NORMAL to show what FULL costs, and retried (duplicate)
// reports, which write nothing.
func BenchmarkReportProgress(b *testing.B) {
	for _, sync := range []string{"FULL", "NORMAL"} {
		b.Run("sync="+sync+"/sequential", func(b *testing.B) {
			db := benchDB(b, sync)
			ctx := b.Context()
			b.ReportAllocs()
			b.ResetTimer()
			for i := range b.N {
				blk, _, err := db.ReportProgress(ctx, benchReport(int64(i)))
				if err != nil {
					b.Fatal(err)
				}
				sinkBlock = blk
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "reports/s")
		})
		b.Run("sync="+sync+"/parallel", func(b *testing.B) {
			db := benchDB(b, sync)
			ctx := b.Context()
			var next atomic.Int64
			b.ReportAllocs()
			b.SetParallelism(4)
			b.ResetTimer()
			b.RunParallel(func(pb *testing.PB) {
				var blk Block
				for pb.Next() {
					var err error
					if blk, _, err = db.ReportProgress(ctx, benchReport(next.Add(1))); err != nil {
						b.Error(err)
						return
					}
				}
				sinkBlock = blk
			})
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "reports/s")
		})
	}
	b.Run("sync=FULL/duplicate", func(b *testing.B) {
		db := benchDB(b, "FULL")
		ctx := b.Context()
		r := benchReport(1)
		if _, _, err := db.ReportProgress(ctx, r); err != nil {
			b.Fatal(err)
		}
		b.ReportAllocs()
		b.ResetTimer()
		for range b.N {
			blk, dup, err := db.ReportProgress(ctx, r)
			if err != nil || !dup {
				b.Fatal(dup, err)
			}
			sinkBlock = blk
		}
		b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "reports/s")
	})
}

// BenchmarkCreateBlocks measures CreateBlocks (synchronous=FULL) per call
// with 1 and 100 blocks of 200-byte specs per call.
func BenchmarkCreateBlocks(b *testing.B) {
	for _, size := range []int{1, 100} {
		b.Run(fmt.Sprintf("batch=%d", size), func(b *testing.B) {
			db := benchDB(b, "FULL")
			ctx := b.Context()
			spec := make([]byte, 200)
			batch := make([]Block, size)
			b.ReportAllocs()
			b.ResetTimer()
			for i := range b.N {
				for k := range batch {
					batch[k] = Block{ID: fmt.Sprintf("n%d-%d", i, k), SiteID: "s", TargetID: "t", Priority: 2, FramesWanted: 10, Spec: spec}
				}
				out, err := db.CreateBlocks(ctx, batch)
				if err != nil {
					b.Fatal(err)
				}
				sinkBlocks = out
			}
			b.ReportMetric(float64(b.N*size)/b.Elapsed().Seconds(), "blocks/s")
		})
	}
}
