package postgres

import (
	"context"
	"fmt"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
)

var _ warehouse.Sampler = (*Warehouse)(nil)

// SampleDesign implements warehouse.Sampler with hashtext of the unit id
// as text: a unit is in the sample when |hashtext(id)| mod modulus = 0,
// the same set of units on every run over the same data (hashtext is the
// hash of Postgres's text hash indexes; it is stable within a major
// version, which is all a seed needs).
func (w *Warehouse) SampleDesign(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, modulus int) ([][]float64, []bool, error) {
	keep := ""
	if modulus > 1 {
		keep = fmt.Sprintf("mod(abs(CAST(hashtext(CAST(c.%s AS text)) AS bigint)), %d) = 0", warehouse.Quote(d.Unit), modulus)
	}
	p := len(d.Columns)
	x := make([][]float64, p)
	var z []bool
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args := warehouse.SampleSQL(q.SQL, d, keep)
		rows, err := w.conn.Query(ctx, text, args...)
		if err != nil {
			return fmt.Errorf("sample: %w", w.queryError(err))
		}
		var zi int64
		vals := make([]float64, p)
		ptrs := make([]any, p+1)
		ptrs[0] = &zi
		for j := range vals {
			ptrs[j+1] = &vals[j]
		}
		_, err = pgx.ForEachRow(rows, ptrs, func() error {
			z = append(z, zi == 1)
			for j, v := range vals {
				x[j] = append(x[j], v)
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("sample: %w", w.queryError(err))
		}
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	return x, z, nil
}
