// Package weights ships pdwave's trained network weights inside the binary
// (go:embed), so the program works with no files beside it. The weights and
// how they were made are described in README.md of this folder.
package weights

import (
	_ "embed"
	"fmt"

	"pdwave/model/instrument"
	"pdwave/model/net"
)

//go:embed demo.safetensors
var demo []byte

// DefaultName names the built-in weights in messages and provenance.
const DefaultName = "demo.safetensors"

// Default returns a fresh copy of the built-in weights, trained for the
// invented demo telescope of testdata/demo-site.yaml (0.5 m, 600 nm,
// 0.120 arcsec pixels, 1 wave PV defocus diversity, 64 px patches, KL
// modes). Callers may modify the returned model.
func Default() (*net.Model, error) {
	m, err := net.Decode(demo)
	if err != nil {
		return nil, fmt.Errorf("built-in weights %s: %w", DefaultName, err)
	}
	return m, nil
}

// For returns the built-in weights if they were made for in — its optics,
// diversity, patch size, mode count and basis (instrument.Compatible with
// the weights' metadata, Meta.Instrument) — or an error saying what
// differs.
func For(in instrument.Instrument) (*net.Model, error) {
	m, err := Default()
	if err != nil {
		return nil, err
	}
	if err := instrument.Compatible(m.Meta.Instrument(), in); err != nil {
		return nil, fmt.Errorf("built-in weights: %w", err)
	}
	return m, nil
}
