package sqlcore

import (
	"net/url"
	"regexp"
	"strings"
)

// Flat is an error whose message was flattened (one line, secrets
// scrubbed) while errs stay reachable for errors.Is and errors.As: the
// original driver error and the class (warehouse.ErrBadInput, ...).
func Flat(msg string, errs ...error) error { return &flatError{msg, errs} }

type flatError struct {
	msg  string
	errs []error
}

func (e *flatError) Error() string   { return e.msg }
func (e *flatError) Unwrap() []error { return e.errs }

// OneLine flattens an error message to one line for single-line logs:
// blank lines go, and so do the "LINE 1: ..." and caret lines with which
// engines repeat the query text, which carry nothing once the query is
// named.
func OneLine(err error) string {
	var parts []string
	for _, l := range strings.Split(err.Error(), "\n") {
		l = strings.TrimSpace(l)
		if l != "" && !strings.HasPrefix(l, "LINE ") && strings.Trim(l, "^ ") != "" {
			parts = append(parts, l)
		}
	}
	return strings.Join(parts, " ")
}

// DSNSecrets finds the password a connection string carries (URL user
// info, a password query parameter, or a key=value password) before
// parsing, so that even an unparsable string cannot leak it.
func DSNSecrets(dsn string) []string {
	var out []string
	if u, err := url.Parse(dsn); err == nil && u.User != nil {
		if p, ok := u.User.Password(); ok && p != "" {
			out = append(out, p, url.QueryEscape(p), url.PathEscape(p))
		}
		for k, vs := range u.Query() {
			if strings.EqualFold(k, "password") {
				out = append(out, vs...)
			}
		}
	} else if i := strings.Index(dsn, "://"); i >= 0 {
		// A URL that does not parse: take what lies between user: and @.
		rest := dsn[i+3:]
		if at := strings.LastIndex(rest, "@"); at >= 0 {
			if c := strings.Index(rest[:at], ":"); c >= 0 && c+1 < at {
				out = append(out, rest[c+1:at])
			}
		}
	}
	for _, m := range kvPassword.FindAllStringSubmatch(dsn, -1) {
		out = append(out, strings.Trim(m[2], "'"), m[2])
	}
	return out
}

var (
	kvPassword  = regexp.MustCompile(`(?i)(password\s*=\s*)('[^']*'|[^\s&]+)`)
	urlPassword = regexp.MustCompile(`(://[^:/@\s]*:)[^@\s]*@`)
)

// Scrub removes every known secret and any URL or key=value password from
// msg.
func Scrub(msg string, secrets []string) string {
	for _, s := range secrets {
		if len(s) > 0 {
			msg = strings.ReplaceAll(msg, s, "xxxxx")
		}
	}
	msg = urlPassword.ReplaceAllString(msg, "${1}xxxxx@")
	return kvPassword.ReplaceAllString(msg, "${1}xxxxx")
}
