package main

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

// TestHoistFlags: every level's flags, with their values, move ahead of
// its positionals; subcommands, "--" and unknown commands are left where
// the library expects them.
func TestHoistFlags(t *testing.T) {
	code := 0
	app := newApp(context.Background(), &code, io.Discard, io.Discard)
	for _, tc := range []struct {
		name     string
		args     string
		want     string
		unchange bool
	}{
		{name: "report, flags after the run", args: "report --study s.yaml latest --out r.html", want: "report --study s.yaml --out r.html latest"},
		{name: "report, all flags after", args: "report latest --study s.yaml --out=r.html", want: "report --study s.yaml --out=r.html latest"},
		{name: "report, no run", args: "report --out r.html --study s.yaml", unchange: true},
		{name: "run, flags after the study", args: "run s.yaml --dry-run --report r.html --json", want: "run --dry-run --report r.html --json s.yaml"},
		{name: "run, global flag stays first", args: "--log-format json run s.yaml --skip-unchanged", want: "--log-format json run --skip-unchanged s.yaml"},
		{name: "runs, value flags", args: "runs --limit 3 --study s.yaml", unchange: true},
		{name: "runs show, flag after the run", args: "runs show latest --study s.yaml", want: "runs show --study s.yaml latest"},
		{name: "runs show, parent flag before subcommand", args: "runs --study s.yaml show latest", unchange: true},
		{name: "runs diff, flag between runs", args: "runs diff A --study s.yaml B", want: "runs diff --study s.yaml A B"},
		{name: "runs diff, flag after runs", args: "runs diff A B --study s.yaml", want: "runs diff --study s.yaml A B"},
		{name: "demo, negative-looking value", args: "demo --units -5 --dir d", unchange: true},
		{name: "double dash ends flags", args: "report latest --study s.yaml -- --out", want: "report --study s.yaml latest -- --out"},
		{name: "help flag after a positional", args: "report latest -h", want: "report -h latest"},
		{name: "unknown command left alone", args: "bogus x --study s.yaml", unchange: true},
		{name: "empty", args: "", unchange: true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			args := append([]string{"counterpart"}, strings.Fields(tc.args)...)
			want := tc.want
			if tc.unchange {
				want = tc.args
			}
			got := hoistFlags(args, app)
			if !slices.Equal(got, append([]string{"counterpart"}, strings.Fields(want)...)) {
				t.Errorf("hoistFlags(%q) = %q, want %q", tc.args, strings.Join(got[1:], " "), want)
			}
		})
	}
}

// TestFlagsAfterPositionals runs every command that takes positional
// arguments with its flags written after them, as the README does, and
// checks the flags took effect; surplus positionals fail with exit 2 and
// one stderr line instead of being dropped.
func TestFlagsAfterPositionals(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"counterpart", "demo", "--dir", dir, "--units", "1500"}, &out, &errb); code != exitOK {
		t.Fatalf("demo exit %d: %s", code, errb.String())
	}
	study := filepath.Join(dir, "hf_coaching.yaml")
	// A second run gives runs diff two ids.
	if code := run(ctx, []string{"counterpart", "run", study}, io.Discard, &errb); code != exitOK {
		t.Fatalf("second run exit %d: %s", code, errb.String())
	}
	out.Reset()
	if code := run(ctx, []string{"counterpart", "runs", "--study", study}, &out, &errb); code != exitOK {
		t.Fatalf("runs exit %d: %s", code, errb.String())
	}
	var ids []string
	for _, l := range strings.Split(strings.TrimSpace(out.String()), "\n")[1:] {
		ids = append(ids, strings.Fields(l)[0])
	}
	if len(ids) != 2 {
		t.Fatalf("runs lists %d runs, want 2:\n%s", len(ids), out.String())
	}
	a, b := ids[1], ids[0]
	// canonical renders what a case's flags-first spelling prints, to
	// compare with.
	canonical := func(t *testing.T, args ...string) string {
		t.Helper()
		var o, e bytes.Buffer
		if code := run(ctx, append([]string{"counterpart"}, args...), &o, &e); code != exitOK {
			t.Fatalf("%v: exit %d: %s", args, code, e.String())
		}
		return o.String()
	}
	out1 := filepath.Join(dir, "r1.html")
	out2 := filepath.Join(dir, "r2.html")

	for _, tc := range []struct {
		name string
		args []string
		code int
		// check inspects a successful run's stdout.
		check func(t *testing.T, stdout string)
	}{
		{name: "run STUDY --dry-run --json", args: []string{"run", study, "--dry-run", "--json"}, check: func(t *testing.T, stdout string) {
			var sum struct {
				DryRun bool `json:"dry_run"`
			}
			if err := json.Unmarshal([]byte(stdout), &sum); err != nil || !sum.DryRun {
				t.Errorf("--json --dry-run after the study ignored (dry_run %v, %v):\n%.300s", sum.DryRun, err, stdout)
			}
		}},
		{name: "report --study S latest --out FILE", args: []string{"report", "--study", study, "latest", "--out", out1}, check: func(t *testing.T, stdout string) {
			if _, err := os.Stat(out1); err != nil {
				t.Errorf("--out after the run ignored: %v", err)
			}
			if !strings.HasPrefix(stdout, "wrote "+out1+" (run "+b+")") {
				t.Errorf("stdout %q", stdout)
			}
		}},
		{name: "report RUN --study S --out=FILE", args: []string{"report", a, "--study", study, "--out=" + out2}, check: func(t *testing.T, stdout string) {
			if !strings.HasPrefix(stdout, "wrote "+out2+" (run "+a+")") {
				t.Errorf("stdout %q", stdout)
			}
		}},
		{name: "runs show latest --study S", args: []string{"runs", "show", "latest", "--study", study}, check: func(t *testing.T, stdout string) {
			if want := canonical(t, "runs", "show", "--study", study, "latest"); stdout != want {
				t.Errorf("stdout differs from the flags-first spelling:\n%s\nwant\n%s", stdout, want)
			}
		}},
		{name: "runs diff A --study S B", args: []string{"runs", "diff", a, "--study", study, b}, check: func(t *testing.T, stdout string) {
			if want := canonical(t, "runs", "diff", "--study", study, a, b); stdout != want {
				t.Errorf("stdout differs from the flags-first spelling:\n%s\nwant\n%s", stdout, want)
			}
		}},
		{name: "runs diff A B --study S", args: []string{"runs", "diff", a, b, "--study", study}, check: func(t *testing.T, stdout string) {
			if !strings.HasPrefix(stdout, "from "+a) {
				t.Errorf("stdout %q", stdout)
			}
		}},
		{name: "report with two runs", args: []string{"report", a, b, "--study", study}, code: exitBadInput},
		{name: "runs show with two runs", args: []string{"runs", "show", a, b, "--study", study}, code: exitBadInput},
		{name: "runs diff with one run", args: []string{"runs", "diff", a, "--study", study}, code: exitBadInput},
		{name: "run with two studies", args: []string{"run", study, study, "--dry-run"}, code: exitBadInput},
		{name: "runs with a stray argument", args: []string{"runs", "latest", "--study", study}, code: exitBadInput},
		{name: "unknown flag after a positional", args: []string{"report", "latest", "--study", study, "--outt", out1}, code: exitBadInput},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var o, e bytes.Buffer
			code := run(ctx, append([]string{"counterpart"}, tc.args...), &o, &e)
			if code != tc.code {
				t.Fatalf("exit %d, want %d; stderr %q", code, tc.code, e.String())
			}
			if tc.code != exitOK {
				if lines := strings.Split(strings.TrimSpace(e.String()), "\n"); len(lines) != 1 || !strings.HasPrefix(lines[0], "counterpart: ") {
					t.Errorf("stderr is not one counterpart: line: %q", e.String())
				}
				return
			}
			if e.Len() != 0 {
				t.Errorf("stderr not empty on success: %q", e.String())
			}
			tc.check(t, o.String())
		})
	}
}
