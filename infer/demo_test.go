package infer

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// fakePdwave is a stand-in for the pdwave executable: each step writes the
// file the real one would, and compare fails when DEMO_FAIL is set.
const fakePdwave = `#!/bin/sh
case "$1" in
simulate) mkdir burst && echo burst > burst/burst-0001.fits ;;
restore) test -f "$2" && echo restored > restored.fits ;;
compare)
	if [ -n "$DEMO_FAIL" ]; then echo "compare: planted failure" >&2; exit 3; fi
	mkdir report && echo page > report/index.html ;;
esac
`

// TestDemoJobAssemblesOrLeavesNothing runs the demo's steps with a fake
// executable: on success the folder holds every step's file and the
// manifest; when a step fails the error names it with its last stderr line,
// the previous output is kept and no temporary folder is left.
// Planted: the deferred removal of the temporary folder dropped → the
// failure case finds a leftover .out.tmp-* folder.
func TestDemoJobAssemblesOrLeavesNothing(t *testing.T) {
	if _, err := os.Stat("/bin/sh"); err != nil {
		t.Skip("no /bin/sh")
	}
	dir := t.TempDir()
	exe := filepath.Join(dir, "pdwave")
	if err := os.WriteFile(exe, []byte(fakePdwave), 0o755); err != nil {
		t.Fatal(err)
	}
	site := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(site, []byte("site: x\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	parent := filepath.Join(dir, "runs")
	out := filepath.Join(parent, "out")
	var log strings.Builder
	job := DemoJob{Exe: exe, Site: site, Out: out, Field: 64, Seed: 3, Polish: 2, Log: &log}
	if err := job.Run(); err != nil {
		t.Fatalf("demo: %v\n%s", err, log.String())
	}
	for _, f := range []string{demoBurst, "restored.fits", filepath.Join("report", "index.html"), ".pdwave-files"} {
		if _, err := os.Stat(filepath.Join(out, f)); err != nil {
			t.Errorf("after the demo: %v", err)
		}
	}
	if !strings.Contains(log.String(), "pdwave simulate --site "+site) {
		t.Errorf("log does not show the simulate step with the absolute site:\n%s", log.String())
	}

	t.Setenv("DEMO_FAIL", "1")
	err := job.Run()
	if err == nil || !strings.Contains(err.Error(), "demo step 3 (pdwave compare)") ||
		!strings.Contains(err.Error(), "planted failure") {
		t.Fatalf("failed step: got error %v", err)
	}
	if _, err := os.Stat(filepath.Join(out, "restored.fits")); err != nil {
		t.Errorf("the previous demo output is gone after a failed run: %v", err)
	}
	left, err := filepath.Glob(filepath.Join(parent, ".out.tmp-*"))
	if err != nil || len(left) != 0 {
		t.Errorf("temporary folders left after a failed run: %v (%v)", left, err)
	}
}
