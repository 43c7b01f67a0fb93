package postgres

import (
	"testing"

	"counterpart/warehouse/warehousetest"
)

// The benchmarks share the DuckDB engine's cohort (warehousetest.BenchCohort).

func BenchmarkReadCohort1M(b *testing.B) { warehousetest.BenchReadCohort(b, openScratch(b)) }

func BenchmarkPublish1M(b *testing.B) { warehousetest.BenchPublish(b, openScratch(b), "public") }
