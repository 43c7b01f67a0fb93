package sqlcore

import (
	"strings"
	"testing"
)

// TestScrub: passwords never survive into messages, whatever form the
// connection string takes (common practice: libpq URL and key=value
// forms, PostgreSQL manual "Connection Strings").
func TestScrub(t *testing.T) {
	tests := []struct{ dsn, msg string }{
		{"postgres://u:s3cr%40t@h/db", "failed: postgres://u:s3cr%40t@h/db and s3cr@t"},
		{"postgres://u@h/db?password=s3cret", "bad postgres://u@h/db?password=s3cret s3cret"},
		{"host=h user=u password='s3 cret' dbname=db", "cannot parse host=h password='s3 cret' (s3 cret)"},
		{"host=h password=s3cret", "password=s3cret; s3cret"},
		{"postgres://u:s3:cr@t@h", "postgres://u:s3:cr@t@h"},
	}
	for _, tt := range tests {
		got := Scrub(tt.msg, DSNSecrets(tt.dsn))
		for _, secret := range []string{"s3cr", "s3 cret", "cr@t"} {
			if strings.Contains(got, secret) {
				t.Errorf("Scrub(%q) = %q still holds %q", tt.msg, got, secret)
			}
		}
	}
}
