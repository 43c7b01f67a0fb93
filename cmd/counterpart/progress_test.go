package main

import (
	"bytes"
	"log/slog"
	"strings"
	"testing"
	"time"
)

// TestProgressPass checks that IRLS passes are logged only once the stage
// has run for passLogAfter, one record per pass.
func TestProgressPass(t *testing.T) {
	for _, tc := range []struct {
		name    string
		elapsed time.Duration
		want    int
	}{
		{"quiet early", passLogAfter / 2, 0},
		{"logged late", passLogAfter + time.Second, 3},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var buf bytes.Buffer
			p := newProgress(&buf, false, slog.New(slog.NewJSONHandler(&buf, nil)))
			p.stage("fit")
			p.start = time.Now().Add(-tc.elapsed)
			for i := 1; i <= 3; i++ {
				p.pass(i, 100/float64(i))
			}
			if got := strings.Count(buf.String(), `"msg":"fit pass"`); got != tc.want {
				t.Fatalf("%d pass records, want %d: %s", got, tc.want, buf.String())
			}
		})
	}
}
