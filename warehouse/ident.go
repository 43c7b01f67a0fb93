package warehouse

import (
	"fmt"
	"strings"
)

// MaxIdentLen is the longest identifier ValidIdent accepts: Postgres
// truncates identifiers to NAMEDATALEN−1 = 63 bytes (PostgreSQL manual,
// "Identifiers and Key Words"), so a longer name would silently change.
const MaxIdentLen = 63

// ValidIdent reports whether s may be used as a schema, table or column name:
// [a-z_][a-z0-9_]*, at most MaxIdentLen bytes. Only lower case is allowed
// because Postgres folds unquoted names to lower case: a name that passes
// means the same table whether the analyst writes it quoted or not. The
// error wraps ErrBadInput and says what is wrong with s.
func ValidIdent(s string) error {
	if s == "" {
		return fmt.Errorf("%w: empty identifier; use lower-case letters, digits and _", ErrBadInput)
	}
	if len(s) > MaxIdentLen {
		return fmt.Errorf("%w: identifier %.20q… is %d bytes long; the limit is %d", ErrBadInput, s, len(s), MaxIdentLen)
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case c >= 'a' && c <= 'z', c == '_':
		case c >= '0' && c <= '9' && i > 0:
		case c >= '0' && c <= '9':
			return fmt.Errorf("%w: identifier %q starts with a digit; start it with a letter or _", ErrBadInput, s)
		case c >= 'A' && c <= 'Z':
			return fmt.Errorf("%w: identifier %q has upper-case letters; use lower case (alias the column in SQL if needed)", ErrBadInput, s)
		default:
			return fmt.Errorf("%w: identifier %q has the character %q at byte %d; use only lower-case letters, digits and _", ErrBadInput, s, rune(c), i)
		}
	}
	return nil
}

// Quote returns s as a delimited SQL identifier: wrapped in double quotes,
// with every double quote inside doubled (SQL:2016 part 2, 5.2 <delimited
// identifier>; the same rule in DuckDB and Postgres). Quoting keeps reserved
// words such as "order" or "group" usable as column names. Callers pass names
// that passed ValidIdent; Quote itself accepts any string so that an
// unvalidated name can never break out of the quotes.
func Quote(s string) string {
	return `"` + strings.ReplaceAll(s, `"`, `""`) + `"`
}

// QuoteQualified quotes each part and joins them with dots: schema.table or
// table.column.
func QuoteQualified(parts ...string) string {
	q := make([]string, len(parts))
	for i, p := range parts {
		q[i] = Quote(p)
	}
	return strings.Join(q, ".")
}
