package postgres

import (
	"context"
	"fmt"
	"testing"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// The benchmarks share the DuckDB engine's cohort (warehousetest.BenchCohort).

func BenchmarkReadCohort1M(b *testing.B) { warehousetest.BenchReadCohort(b, openScratch(b)) }

func BenchmarkPublish1M(b *testing.B) { warehousetest.BenchPublish(b, openScratch(b), "public") }

// BenchmarkDashboard1M: warehousetest.DashboardQuery from a session of
// its own over keep_runs 10 retained runs (COUNTERPART_BENCH_UNITS units,
// default 1M), idle and while another run publishes, without and then
// with the run_id indexes.
func BenchmarkDashboard1M(b *testing.B) {
	ctx := context.Background()
	dsn := pgtest.NewDatabase(b)
	w := openDSN(b, dsn)
	index := w.Core.D.RunIndex
	w.Core.D.RunIndex = nil
	out, p := warehousetest.PrepareDashboard(b, w, "public", 10)
	dash, err := pgx.Connect(ctx, dsn)
	if err != nil {
		b.Fatal(err)
	}
	defer dash.Close(ctx)
	query := func(q string) error {
		rows, err := dash.Query(ctx, q)
		if err != nil {
			return err
		}
		for rows.Next() {
		}
		rows.Close()
		return rows.Err()
	}
	runs := 10
	publishing := func(b *testing.B) {
		stop, done := make(chan struct{}), make(chan struct{})
		go func() {
			defer close(done)
			for {
				select {
				case <-stop:
					return
				default:
				}
				runs++
				warehousetest.PublishAgain(b, w, out, p, fmt.Sprintf("r%02d", runs))
			}
		}()
		warehousetest.BenchDashboard(b, query)
		close(stop)
		<-done
	}
	for _, indexed := range []bool{false, true} {
		name := "unindexed"
		if indexed {
			name = "indexed"
			w.Core.D.RunIndex = index
			warehousetest.PublishAgain(b, w, out, p, fmt.Sprintf("r%02d", runs+1)) // creates the indexes
			runs++
			warehousetest.Exec(b, w, "ANALYZE")
		}
		b.Run(name+"/idle", func(b *testing.B) { warehousetest.BenchDashboard(b, query) })
		b.Run(name+"/publishing", publishing)
	}
}

// BenchmarkPublishRetention: warehousetest.BenchRetention without and
// with retention, on the partitioned layout (retention drops
// partitions) and on the plain one of earlier versions (retention
// deletes rows, with the run_id indexes).
func BenchmarkPublishRetention(b *testing.B) {
	w := openScratch(b)
	c := warehousetest.RetentionCohort(b, w)
	partitions := w.Core.D.RunPartitions
	defer func() { w.Core.D.RunPartitions = partitions }()
	for _, layout := range []string{"partitioned", "plain"} {
		for _, keep := range []int{0, 1} {
			b.Run(fmt.Sprintf("%s/keep_runs=%d", layout, keep), func(b *testing.B) {
				w.Core.D.RunPartitions = layout == "partitioned"
				warehousetest.BenchRetention(b, w, c, "public", fmt.Sprintf("%s_k%d_", layout, keep), keep)
			})
		}
	}
}
