package duckdb

import (
	"context"
	"fmt"

	"counterpart/warehouse"
)

var (
	_ warehouse.Sampler    = (*Warehouse)(nil)
	_ warehouse.ScaleTuner = (*Warehouse)(nil)
)

// ScaleMemoryPerThread and ScaleMemoryFloor set the DuckDB memory_limit
// of a warehouse-scale run: max(ScaleMemoryFloor, threads ×
// ScaleMemoryPerThread, units × ScaleMemoryPerUnit) bytes. DuckDB runs in this process, so its buffer
// pool is the tool's resident memory: by default it may grow to 80 % of
// the machine's RAM and keeps the pages of the database file it has read,
// which made a warehouse-scale run (3.6 GB at 2 million units × 20
// covariates) larger than the in-memory one (2.3 GB). Under a limit the
// aggregate scans stream from the file (the operating system's page
// cache, not this process, holds it), hash aggregates, joins and sorts
// spill to DuckDB's temporary directory, and large INSERT … SELECT
// statements write their row groups to the file as they go. Every query
// of the mode completed at 2 million units with 128 MB on 2 threads (peak
// RSS 446 MB, most of it the Go heap of matching); the per-thread share
// keeps room for each thread's own buffers on larger machines.
const (
	ScaleMemoryPerThread = 64 << 20
	ScaleMemoryFloor     = 128 << 20
	// ScaleMemoryPerUnit keeps room for the publish step's joins of the
	// run's rows (snapshot, matches, weights), which cannot all spill: at
	// 10,000,000 units a flat 128 MB ran out of memory in the balance sums.
	// 96 bytes a unit is under a tenth of what the in-memory path holds.
	ScaleMemoryPerUnit = 96
)

// TuneForScale implements warehouse.ScaleTuner: SET memory_limit (see
// ScaleMemoryPerThread) for the rest of the session; the setting is
// global to the database instance, which this Warehouse alone uses.
func (w *Warehouse) TuneForScale(ctx context.Context, units int) error {
	var threads int64
	if err := w.conn.QueryRowContext(ctx, "SELECT CAST(current_setting('threads') AS BIGINT)").Scan(&threads); err != nil {
		return fmt.Errorf("read threads setting: %w", dbErr(err))
	}
	limit := max(int64(ScaleMemoryFloor), threads*ScaleMemoryPerThread, int64(units)*ScaleMemoryPerUnit)
	if _, err := w.exec(ctx, fmt.Sprintf("SET memory_limit = '%dMB'", limit>>20)); err != nil {
		return fmt.Errorf("set memory_limit: %w", dbErr(err))
	}
	return nil
}

// SampleDesign implements warehouse.Sampler with DuckDB's hash() of the
// unit id: a unit is in the sample when hash(id) % modulus = 0, which is
// the same set of units on every run over the same data.
func (w *Warehouse) SampleDesign(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, modulus int) ([][]float64, []bool, error) {
	keep := ""
	if modulus > 1 {
		keep = fmt.Sprintf("hash(c.%s) %% %d = 0", warehouse.Quote(d.Unit), modulus)
	}
	p := len(d.Columns)
	x := make([][]float64, p)
	var z []bool
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args := warehouse.SampleSQL(q.SQL, d, keep)
		rows, err := w.conn.QueryContext(ctx, text, args...)
		if err != nil {
			return fmt.Errorf("sample: %w", queryError(err))
		}
		defer rows.Close()
		var zi int64
		vals := make([]float64, p)
		ptrs := make([]any, p+1)
		ptrs[0] = &zi
		for j := range vals {
			ptrs[j+1] = &vals[j]
		}
		for rows.Next() {
			if err := rows.Scan(ptrs...); err != nil {
				return fmt.Errorf("sample: %w", dbErr(err))
			}
			z = append(z, zi == 1)
			for j, v := range vals {
				x[j] = append(x[j], v)
			}
		}
		if err := rows.Err(); err != nil {
			return fmt.Errorf("sample: %w", queryError(err))
		}
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	return x, z, nil
}
