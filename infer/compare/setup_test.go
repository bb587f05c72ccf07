package compare

import (
	"path/filepath"
	"strings"
	"testing"

	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/site"
	"pdwave/weights"
)

// TestResolveWeights: built-in weights that do not fit the request are
// dropped with a note and the fit still resolves; the same weights given
// explicitly are an error naming the mismatch; weights that fit are used;
// a negative prior and a field smaller than a patch are refused.
// Planted: Resolve passing Builtin = false to infer.ConfigWithWeights →
// the built-in case errors and the test fails.
func TestResolveWeights(t *testing.T) {
	st, err := site.Load(filepath.Join("..", "..", "testdata", "demo-site.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	m, err := weights.Default()
	if err != nil {
		t.Fatal(err)
	}
	b := &burst.Burst{Nx: 128, Ny: 128, Frames: 16}
	src := instrument.Sources{Site: st.Instrument()}
	other := src
	other.Flags.Modes = instrument.Some(m.Arch.Modes - 6) // the weights cannot give these

	s, err := Resolve(src, b, Weights{Model: m, Name: "built-in", Builtin: true}, 10, 0.001)
	if err != nil || s.Learned == nil || s.Model != m || s.Fit.Stop.Iterations != 10 || s.Fit.Prior != 0.001 {
		t.Fatalf("fitting built-in weights: learned %v, model %p, fit %+v, err %v", s.Learned, s.Model, s.Fit.Stop, err)
	}
	s, err = Resolve(other, b, Weights{Model: m, Name: "built-in", Builtin: true}, 10, 0.001)
	if err != nil || s.Learned != nil || s.Model != nil || s.Fit.Modes != m.Arch.Modes-6 ||
		len(s.Notes) == 0 || !strings.HasPrefix(s.Notes[0], "Built-in weights not used: ") {
		t.Fatalf("built-in weights for other modes: learned %v, modes %d, notes %q, err %v", s.Learned, s.Fit.Modes, s.Notes, err)
	}
	if _, err = Resolve(other, b, Weights{Model: m, Name: "w.safetensors"}, 10, 0.001); err == nil || !strings.Contains(err.Error(), "modes") {
		t.Errorf("explicit weights for other modes: err %v, want one naming the modes", err)
	}
	if _, err = Resolve(src, b, Weights{Model: m, Builtin: true}, 10, -1); err == nil || !strings.Contains(err.Error(), "--prior") {
		t.Errorf("negative prior: err %v", err)
	}
	small := &burst.Burst{Nx: 32, Ny: 128, Frames: 16}
	if _, err = Resolve(src, small, Weights{Model: m, Builtin: true}, 10, 0.001); err == nil || !strings.Contains(err.Error(), "smaller than one") {
		t.Errorf("field smaller than a patch: err %v", err)
	}
}
