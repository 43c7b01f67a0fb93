package report

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
)

// TestScreenshot renders the demo report in headless Chromium through
// testdata/report/screenshot.sh and checks a real PNG comes out. It runs
// whenever the browser exists (/usr/bin/chromium, or $CHROMIUM). Without
// it the test skips on a developer's machine, saying why, but fails under
// CI=true: a skipped check reads as green, and CI is where the report must
// be seen to render (.ci/run installs Chromium). COUNTERPART_REPORT_DIR
// keeps the HTML and PNG there for a person to look at.
func TestScreenshot(t *testing.T) {
	chromium := os.Getenv("CHROMIUM")
	if chromium == "" {
		chromium = "/usr/bin/chromium"
	}
	if _, err := os.Stat(chromium); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("the browser check cannot run under CI=true: %s not found (.ci/run installs it with apt-get install chromium)", chromium)
		}
		t.Skipf("skipping the browser check: %s not found (apt-get install chromium to run it)", chromium)
	}
	sum, _ := demoSummary(t)
	dir := os.Getenv("COUNTERPART_REPORT_DIR")
	if dir == "" {
		dir = t.TempDir()
	}
	in := filepath.Join(dir, "report.html")
	if err := os.WriteFile(in, []byte(renderHTML(t, sum)), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "report.png")
	cmd := exec.Command("sh", "../../testdata/report/screenshot.sh", in, out)
	cmd.Env = append(os.Environ(), "CHROMIUM="+chromium)
	if b, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("screenshot.sh: %v\n%s", err, b)
	}
	fi, err := os.Stat(out)
	if err != nil {
		t.Fatalf("no screenshot: %v", err)
	}
	if fi.Size() < 20<<10 {
		t.Errorf("screenshot is %d bytes; a rendered report is well over 20 KB", fi.Size())
	}
	png, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.HasPrefix(png, []byte("\x89PNG\r\n\x1a\n")) {
		t.Error("screenshot is not a PNG")
	}
}
