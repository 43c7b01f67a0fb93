package warehouse

import (
	"errors"
	"regexp"
	"strings"
	"testing"
)

func TestValidIdent(t *testing.T) {
	tests := []struct {
		in   string
		ok   bool
		want string // part of the error message
	}{
		{"age", true, ""},
		{"_x1", true, ""},
		{"order", true, ""}, // reserved words are fine: names are always quoted
		{strings.Repeat("a", 63), true, ""},
		{strings.Repeat("a", 64), false, "64 bytes"},
		{"", false, "empty"},
		{"1abc", false, "starts with a digit"},
		{"Age", false, "upper-case"},
		{"a-b", false, `'-'`},
		{"a b", false, `' '`},
		{`a"b`, false, `'"'`},
		{"é", false, "byte 0"},
		{"a;drop table x", false, `';'`},
	}
	for _, tt := range tests {
		err := ValidIdent(tt.in)
		if (err == nil) != tt.ok {
			t.Errorf("ValidIdent(%q) = %v, want ok=%v", tt.in, err, tt.ok)
			continue
		}
		if err != nil {
			if !errors.Is(err, ErrBadInput) {
				t.Errorf("ValidIdent(%q) error %v does not wrap ErrBadInput", tt.in, err)
			}
			if !strings.Contains(err.Error(), tt.want) {
				t.Errorf("ValidIdent(%q) = %q, want it to mention %q", tt.in, err, tt.want)
			}
		}
	}
}

func TestQuote(t *testing.T) {
	// Expected forms follow SQL:2016 part 2, 5.2 <delimited identifier>.
	tests := []struct{ in, want string }{
		{"age", `"age"`},
		{"", `""`},
		{`a"b`, `"a""b"`},
		{`"`, `""""`},
		{"x.y", `"x.y"`},
	}
	for _, tt := range tests {
		if got := Quote(tt.in); got != tt.want {
			t.Errorf("Quote(%q) = %s, want %s", tt.in, got, tt.want)
		}
	}
	if got := QuoteQualified("main", "t"); got != `"main"."t"` {
		t.Errorf("QuoteQualified = %s", got)
	}
}

// unquote reads one delimited identifier the way a SQL lexer does (SQL:2016
// part 2, 5.2): a doubled quote stands for one quote, a single quote ends the
// identifier. It reports where the identifier ended, so a fuzz input that
// breaks out of the quotes shows up as trailing text.
func unquote(s string) (ident string, rest string, ok bool) {
	if len(s) == 0 || s[0] != '"' {
		return "", s, false
	}
	var b strings.Builder
	for i := 1; i < len(s); i++ {
		if s[i] != '"' {
			b.WriteByte(s[i])
			continue
		}
		if i+1 < len(s) && s[i+1] == '"' {
			b.WriteByte('"')
			i++
			continue
		}
		return b.String(), s[i+1:], true
	}
	return "", "", false
}

func FuzzQuote(f *testing.F) {
	for _, s := range []string{"", "a", `"`, `""`, `a"b`, `x"; drop table t; --`, "\x00", "é"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		q := Quote(s)
		got, rest, ok := unquote(q)
		if !ok || rest != "" || got != s {
			t.Fatalf("Quote(%q) = %s reads back as %q with %q left over (ok=%v)", s, q, got, rest, ok)
		}
	})
}

// identRE is an independent statement of the rule ValidIdent implements.
var identRE = regexp.MustCompile(`^[a-z_][a-z0-9_]*$`)

func FuzzValidIdent(f *testing.F) {
	for _, s := range []string{"", "a", "A", "_", "1", "a1", "a-b", strings.Repeat("z", 64), "ß"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		err := ValidIdent(s)
		want := identRE.MatchString(s) && len(s) <= MaxIdentLen
		if (err == nil) != want {
			t.Fatalf("ValidIdent(%q) = %v, want ok=%v", s, err, want)
		}
		if err != nil {
			if !errors.Is(err, ErrBadInput) {
				t.Fatalf("ValidIdent(%q) error does not wrap ErrBadInput", s)
			}
			if strings.Contains(err.Error(), "\n") {
				t.Fatalf("ValidIdent(%q) error spans lines: %q", s, err)
			}
			return
		}
		// A valid name needs no escaping inside its quotes.
		if q := Quote(s); q != `"`+s+`"` {
			t.Fatalf("Quote(%q) = %s escaped a valid identifier", s, q)
		}
	})
}
