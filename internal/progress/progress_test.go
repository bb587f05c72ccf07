package progress

import (
	"bytes"
	"fmt"
	"log/slog"
	"os"
	"strings"
	"testing"
)

// TestLines checks each finished line becomes one timestamped record,
// carriage-return updates keep only their last state, and nothing is
// logged before the newline. Planted: logging the text before each carriage
// return as well gave five records and failed.
func TestLines(t *testing.T) {
	var out bytes.Buffer
	w := Lines(slog.New(slog.NewTextHandler(&out, nil)))
	fmt.Fprint(w, "\rrestore: 1/3 patches")
	fmt.Fprint(w, "\rrestore: 2/3 patches")
	if out.Len() != 0 {
		t.Fatalf("logged before the newline: %q", out.String())
	}
	fmt.Fprint(w, "\rrestore: 3/3 patches\n")
	fmt.Fprint(w, "step 1/2 loss 0.5\nstep 2/2 ")
	fmt.Fprint(w, "loss 0.4\n")
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	if len(lines) != 3 {
		t.Fatalf("%d records, want 3:\n%s", len(lines), out.String())
	}
	for i, want := range []string{"restore: 3/3 patches", "step 1/2 loss 0.5", "step 2/2 loss 0.4"} {
		if !strings.HasPrefix(lines[i], "time=") || !strings.Contains(lines[i], `msg="`+want+`"`) {
			t.Errorf("record %d %q, want a timestamped %q", i, lines[i], want)
		}
	}
}

// TestIsTerminal checks a pipe and /dev/null are not terminals (opened for
// reading only). Planted: the character-device test of other systems took
// /dev/null for a terminal and failed on Linux.
func TestIsTerminal(t *testing.T) {
	r, w, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	defer w.Close()
	if IsTerminal(w) {
		t.Error("a pipe taken for a terminal")
	}
	f, err := os.Open(os.DevNull)
	if err != nil {
		t.Skip(err)
	}
	defer f.Close()
	if IsTerminal(f) {
		t.Error("/dev/null taken for a terminal")
	}
}
