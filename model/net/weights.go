package net

import (
	"encoding/binary"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"

	"pdwave/internal/atomicfile"
	"pdwave/model/instrument"
)

// Weight files use the safetensors layout: an 8-byte little-endian header
// length n, n bytes of JSON header, then the raw little-endian tensor data.
// The header maps every tensor name to {"dtype","shape","data_offsets"}
// (offsets relative to the start of the data) and "__metadata__" to a map of
// strings. pdwave records in the metadata:
//
//	format        "pdwave-weights"
//	format_version WeightsVersion
//	arch          JSON of Arch
//	site, basis, modes, patch, frames
//	diameter_m, obscuration, wavelength_m, pixel_scale_rad, diversity_pv_waves
//	training      JSON map of the training settings
//	version       program version
//
// The output scale is stored as the tensor "out.scale"; the trainable tensors
// under their names in Model.Params. All tensors are F64.

// WeightsFormat names pdwave weight files in the metadata.
const WeightsFormat = "pdwave-weights"

// WeightsVersion is the version of the weight file layout written here.
const WeightsVersion = "1"

// maxHeader bounds the JSON header size accepted when reading (1 MiB).
const maxHeader = 1 << 20

type tensorEntry struct {
	Dtype   string `json:"dtype"`
	Shape   []int  `json:"shape"`
	Offsets [2]int `json:"data_offsets"`
}

// Write writes m in the weight file layout to w.
func (m *Model) Write(w io.Writer) error {
	if err := m.check(); err != nil {
		return err
	}
	arch, err := json.Marshal(m.Arch)
	if err != nil {
		return fmt.Errorf("net: encoding architecture: %w", err)
	}
	training := m.Meta.Training
	if training == nil {
		training = map[string]string{}
	}
	tr, err := json.Marshal(training)
	if err != nil {
		return fmt.Errorf("net: encoding training settings: %w", err)
	}
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	meta := map[string]string{
		"format":             WeightsFormat,
		"format_version":     WeightsVersion,
		"arch":               string(arch),
		"site":               m.Meta.Site,
		"basis":              m.Meta.Basis,
		"modes":              strconv.Itoa(m.Meta.Modes),
		"patch":              strconv.Itoa(m.Meta.Patch),
		"frames":             strconv.Itoa(m.Meta.Frames),
		"diameter_m":         f(m.Meta.Diameter),
		"obscuration":        f(m.Meta.Obscuration),
		"wavelength_m":       f(m.Meta.Wavelength),
		"pixel_scale_rad":    f(m.Meta.PixelScale),
		"diversity_pv_waves": f(m.Meta.DiversityPV),
		"training":           string(tr),
		"version":            m.Meta.Version,
	}
	all := append([]*Tensor{{Name: "out.scale", Shape: []int{len(m.Scale)}, Data: m.Scale}}, m.Params...)
	header := map[string]any{"__metadata__": meta}
	off := 0
	for _, t := range all {
		header[t.Name] = tensorEntry{Dtype: "F64", Shape: t.Shape, Offsets: [2]int{off, off + 8*len(t.Data)}}
		off += 8 * len(t.Data)
	}
	hj, err := json.Marshal(header)
	if err != nil {
		return fmt.Errorf("net: encoding weight header: %w", err)
	}
	// Pad the header with spaces so the data starts 8-byte aligned.
	for (8+len(hj))%8 != 0 {
		hj = append(hj, ' ')
	}
	buf := make([]byte, 8, 8+len(hj)+off)
	binary.LittleEndian.PutUint64(buf, uint64(len(hj)))
	buf = append(buf, hj...)
	for _, t := range all {
		for _, v := range t.Data {
			buf = binary.LittleEndian.AppendUint64(buf, math.Float64bits(v))
		}
	}
	if _, err := w.Write(buf); err != nil {
		return fmt.Errorf("net: writing weights: %w", err)
	}
	return nil
}

// Save writes m to path atomically with internal/atomicfile (temporary file
// in the same directory, synced, mode 0644 under the umask, renamed).
func (m *Model) Save(path string) error {
	return atomicfile.Write(path, m.Write)
}

// Load reads a weight file from path.
func Load(path string) (*Model, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading weights: %w", err)
	}
	m, err := Decode(data)
	if err != nil {
		return nil, fmt.Errorf("reading weights %s: %w", path, err)
	}
	return m, nil
}

// Read reads a weight file from r.
func Read(r io.Reader) (*Model, error) {
	data, err := io.ReadAll(r)
	if err != nil {
		return nil, fmt.Errorf("reading weights: %w", err)
	}
	return Decode(data)
}

// MaxScale is the largest output scale a weight file may hold, rad: the
// Kolmogorov standard deviation of tip/tilt at D/r0 = 1000 is about 1000 rad
// (Noll 1976, Table IV: 0.449·(D/r0)^(5/6)), far beyond any seeing phase
// diversity can handle.
const MaxScale = 1000

// Decode parses a weight file held in memory. It returns an error (never
// panics) for a file that is truncated, not a pdwave weight file, of an
// unknown layout version, or whose tensors do not match its architecture.
func Decode(data []byte) (*Model, error) {
	raw, body, meta, err := decodeHeader(data)
	if err != nil {
		return nil, err
	}
	m := &Model{}
	if err := json.Unmarshal([]byte(meta["arch"]), &m.Arch); err != nil {
		return nil, fmt.Errorf("weight file architecture: %w", err)
	}
	if err := m.Arch.Validate(); err != nil {
		return nil, err
	}
	if m.Arch.Channels != FeatureChannels {
		return nil, fmt.Errorf("weight file network reads %d input channels, the features have %d", m.Arch.Channels, FeatureChannels)
	}
	if need := 8 * (m.Arch.paramCount() + m.Arch.Modes); need > len(body) {
		return nil, fmt.Errorf("weight file holds %d bytes of tensors, its architecture needs %d", len(body), need)
	}
	if m.Meta, err = decodeMeta(meta); err != nil {
		return nil, err
	}
	if m.Scale, err = readTensor(raw, body, "out.scale", []int{m.Arch.Modes}); err != nil {
		return nil, err
	}
	for i, v := range m.Scale {
		if !(v > 0 && v <= MaxScale) {
			return nil, fmt.Errorf("weight file output scale %d is %g rad, want (0, %g]", i, v, float64(MaxScale))
		}
	}
	m.Params = makeParams(m.Arch)
	for _, p := range m.Params {
		if p.Data, err = readTensor(raw, body, p.Name, p.Shape); err != nil {
			return nil, err
		}
	}
	if m.Meta.Modes != m.Arch.Modes {
		return nil, fmt.Errorf("weight file records %d modes but the network has %d outputs", m.Meta.Modes, m.Arch.Modes)
	}
	return m, nil
}

// decodeHeader splits a weight file into its JSON header entries (raw,
// by tensor name), the tensor data that follows (body, aliasing data) and
// the string metadata, which must name WeightsFormat and WeightsVersion.
func decodeHeader(data []byte) (raw map[string]json.RawMessage, body []byte, meta map[string]string, err error) {
	if len(data) < 8 {
		return nil, nil, nil, fmt.Errorf("weight file too short (%d bytes)", len(data))
	}
	hl := binary.LittleEndian.Uint64(data)
	if hl > maxHeader || hl > uint64(len(data)-8) {
		return nil, nil, nil, fmt.Errorf("weight file header length %d does not fit the file (%d bytes)", hl, len(data))
	}
	if err := json.Unmarshal(data[8:8+hl], &raw); err != nil {
		return nil, nil, nil, fmt.Errorf("weight file header: %w", err)
	}
	body = data[8+hl:]
	if mr, ok := raw["__metadata__"]; !ok {
		return nil, nil, nil, fmt.Errorf("weight file has no __metadata__; not a pdwave weight file")
	} else if err := json.Unmarshal(mr, &meta); err != nil {
		return nil, nil, nil, fmt.Errorf("weight file metadata: %w", err)
	}
	if meta["format"] != WeightsFormat {
		return nil, nil, nil, fmt.Errorf("weight file format is %q, want %q", meta["format"], WeightsFormat)
	}
	if meta["format_version"] != WeightsVersion {
		return nil, nil, nil, fmt.Errorf("weight file layout version %q, this program reads %q", meta["format_version"], WeightsVersion)
	}
	return raw, body, meta, nil
}

// decodeMeta parses the Meta fields from the weight file metadata strings
// (lengths in m, angles in rad); the first unparsable number is the error.
func decodeMeta(meta map[string]string) (Meta, error) {
	var err error
	num := func(key string) float64 {
		if err != nil {
			return 0
		}
		var v float64
		if v, err = strconv.ParseFloat(meta[key], 64); err != nil {
			err = fmt.Errorf("weight file metadata %s: %w", key, err)
		}
		return v
	}
	integer := func(key string) int {
		if err != nil {
			return 0
		}
		var v int
		if v, err = strconv.Atoi(meta[key]); err != nil {
			err = fmt.Errorf("weight file metadata %s: %w", key, err)
		}
		return v
	}
	md := Meta{
		Site: meta["site"], Basis: meta["basis"], Version: meta["version"],
		Modes: integer("modes"), Patch: integer("patch"), Frames: integer("frames"),
		Diameter: num("diameter_m"), Obscuration: num("obscuration"), Wavelength: num("wavelength_m"),
		PixelScale: num("pixel_scale_rad"), DiversityPV: num("diversity_pv_waves"),
	}
	if err == nil {
		err = md.validate()
	}
	if err != nil {
		return Meta{}, err
	}
	if s := meta["training"]; s != "" {
		if err := json.Unmarshal([]byte(s), &md.Training); err != nil {
			return Meta{}, fmt.Errorf("weight file training settings: %w", err)
		}
	}
	return md, nil
}

// validate checks the metadata numbers: finite, lengths and scales
// positive or 0 (unknown), the obscuration in [0, 1), the diversity within
// ±1000 waves, sizes within the instrument's and the architecture's limits.
func (m Meta) validate() error {
	for _, c := range []struct {
		name string
		v    float64
	}{{"diameter_m", m.Diameter}, {"wavelength_m", m.Wavelength}, {"pixel_scale_rad", m.PixelScale}} {
		if !(c.v >= 0) || math.IsInf(c.v, 0) {
			return fmt.Errorf("weight file metadata %s = %g, want a finite number ≥ 0", c.name, c.v)
		}
	}
	switch {
	case !(m.Obscuration >= 0 && m.Obscuration < 1):
		return fmt.Errorf("weight file metadata obscuration = %g, want [0, 1)", m.Obscuration)
	case !(math.Abs(m.DiversityPV) <= 1000):
		return fmt.Errorf("weight file metadata diversity_pv_waves = %g, want a finite number within ±1000", m.DiversityPV)
	case m.Patch != 0 && (m.Patch < instrument.MinPatch || m.Patch > instrument.MaxPatch):
		return fmt.Errorf("weight file metadata patch = %d, want %d to %d", m.Patch, instrument.MinPatch, instrument.MaxPatch)
	case m.Frames < 0 || m.Frames > 100000:
		return fmt.Errorf("weight file metadata frames = %d, want 0 to 100000", m.Frames)
	}
	return nil
}

// readTensor returns a fresh copy of the tensor name from body, checking
// its header entry in raw: dtype F64, the given shape, offsets inside body
// and finite values.
func readTensor(raw map[string]json.RawMessage, body []byte, name string, shape []int) ([]float64, error) {
	er, ok := raw[name]
	if !ok {
		return nil, fmt.Errorf("weight file lacks tensor %s", name)
	}
	var e tensorEntry
	if err := json.Unmarshal(er, &e); err != nil {
		return nil, fmt.Errorf("weight file tensor %s: %w", name, err)
	}
	if e.Dtype != "F64" {
		return nil, fmt.Errorf("weight file tensor %s has dtype %s, want F64", name, e.Dtype)
	}
	if !sameShape(e.Shape, shape) {
		return nil, fmt.Errorf("weight file tensor %s has shape %v, architecture needs %v", name, e.Shape, shape)
	}
	n := 1
	for _, s := range shape {
		n *= s
	}
	b, end := e.Offsets[0], e.Offsets[1]
	if b < 0 || b > len(body) || n > (len(body)-b)/8 || end != b+8*n {
		return nil, fmt.Errorf("weight file tensor %s has data offsets %v, want %d values inside %d bytes", name, e.Offsets, n, len(body))
	}
	v := make([]float64, n)
	for i := range v {
		v[i] = math.Float64frombits(binary.LittleEndian.Uint64(body[b+8*i:]))
		if math.IsNaN(v[i]) || math.IsInf(v[i], 0) {
			return nil, fmt.Errorf("weight file tensor %s holds a non-finite value", name)
		}
	}
	return v, nil
}
