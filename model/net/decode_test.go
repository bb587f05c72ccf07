package net

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
)

// encoded returns a valid weight file of the default architecture.
func encoded(t testing.TB) []byte {
	t.Helper()
	scale := make([]float64, 10)
	for i := range scale {
		scale[i] = 0.5
	}
	m, err := New(DefaultArch(10), demoMeta(), scale, 1)
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := m.Write(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// rewrite changes the JSON header of a weight file through fn and returns
// the file with the same tensor bytes.
func rewrite(t *testing.T, file []byte, fn func(h map[string]any)) []byte {
	t.Helper()
	hl := binary.LittleEndian.Uint64(file)
	var h map[string]any
	if err := json.Unmarshal(file[8:8+hl], &h); err != nil {
		t.Fatal(err)
	}
	fn(h)
	hdr, err := json.Marshal(h)
	if err != nil {
		t.Fatal(err)
	}
	out := binary.LittleEndian.AppendUint64(nil, uint64(len(hdr)))
	return append(append(out, hdr...), file[8+hl:]...)
}

// TestDecodeRefusesHostileFiles checks every bad-weights case of the
// bad-input table gives one error before anything large is allocated:
// overflowing offsets, an architecture of 1e12 units or one whose tensors
// are not in the file, 3 input channels, NaN and out-of-range metadata,
// zero and huge output scales. Planted: without the offset bound the
// overflow case panics; without the size check the huge architecture
// allocates (and the test dies).
func TestDecodeRefusesHostileFiles(t *testing.T) {
	good := encoded(t)
	if _, err := Decode(good); err != nil {
		t.Fatal(err)
	}
	meta := func(key, v string) func(map[string]any) {
		return func(h map[string]any) { h["__metadata__"].(map[string]any)[key] = v }
	}
	arch := func(field string, v any) func(map[string]any) {
		return func(h map[string]any) {
			md := h["__metadata__"].(map[string]any)
			var a map[string]any
			json.Unmarshal([]byte(md["arch"].(string)), &a)
			a[field] = v
			b, _ := json.Marshal(a)
			md["arch"] = string(b)
		}
	}
	for _, c := range []struct {
		name string
		fn   func(map[string]any)
		want string
	}{
		{"offset overflow", func(h map[string]any) {
			// b + 8n wraps to a negative end; written as an exact integer literal
			h["enc.w"].(map[string]any)["data_offsets"] = json.RawMessage(fmt.Sprintf("[%d, %d]", math.MaxInt64-100000, math.MinInt64+162143))
		}, "offsets"},
		{"negative offset", func(h map[string]any) { h["enc.b"].(map[string]any)["data_offsets"] = []any{-8, 504} }, "offsets"},
		{"1e12 hidden units", arch("Hidden", 1e12), "hidden"},
		{"tensors not in the file", arch("Hidden", 4000), "needs"},
		{"3 input channels", arch("Channels", 3), "input channels"},
		{"NaN diameter", meta("diameter_m", "NaN"), "diameter_m"},
		{"obscuration 1", meta("obscuration", "1"), "obscuration"},
		{"huge patch", meta("patch", "100000"), "patch"},
		{"infinite diversity", meta("diversity_pv_waves", "+Inf"), "diversity"},
	} {
		_, err := Decode(rewrite(t, good, c.fn))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one mentioning %q", c.name, err, c.want)
		}
	}
}

// TestImplausiblePredictionRefused checks that a network whose weights
// give coefficients beyond MaxPredictionSigma output scales fails with
// ErrImplausible instead of returning them (planted: without the check the
// 1e300-scaled weights return coefficients of 1e299 rad).
func TestImplausiblePredictionRefused(t *testing.T) {
	m, err := Decode(encoded(t))
	if err != nil {
		t.Fatal(err)
	}
	last := m.Params[len(m.Params)-1] // head2.b: a bias on every output
	for i := range last.Data {
		last.Data[i] = 1e300
	}
	m.Meta.Patch = 64
	est, err := NewEstimator(m)
	if err != nil {
		t.Fatal(err)
	}
	data := [2][][]float64{make([][]float64, 2), make([][]float64, 2)}
	for c := range data {
		for f := range data[c] {
			im := make([]float64, 64*64)
			for i := range im {
				im[i] = 100 + float64((i*7919+c*31+f)%97)
			}
			data[c][f] = im
		}
	}
	_, _, err = est.Burst(data)
	if !errors.Is(err, ErrImplausible) {
		t.Fatalf("prediction from broken weights: error %v, want ErrImplausible", err)
	}
}

// FuzzDecode feeds arbitrary bytes, seeded with a valid file and damaged
// copies, to the weights decoder: it must return an error or a model, never
// panic or allocate beyond the file's size.
func FuzzDecode(f *testing.F) {
	good := encoded(f)
	f.Add(good)
	f.Add(good[:len(good)/2])
	f.Add([]byte{8, 0, 0, 0, 0, 0, 0, 0, '{', '}'})
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := Decode(data)
		if err == nil && m.NumParams() > len(data)/8 {
			t.Fatalf("decoded %d weights from %d bytes", m.NumParams(), len(data))
		}
	})
}
