package main

import (
	"fmt"

	"github.com/spf13/pflag"

	"pdwave/model/instrument"
	"pdwave/model/modes"
)

// flagInstrument returns the instrument values the user gave on the
// command line: the flags --patch, --modes, --basis and --d-over-r0 of fs
// that exist and were set explicitly (an explicit 0 is kept; instrument.Resolve
// refuses it with the reason). It errors only on an unknown basis name.
func flagInstrument(fs *pflag.FlagSet) (instrument.Partial, error) {
	var p instrument.Partial
	changed := func(name string) bool { return fs.Lookup(name) != nil && fs.Changed(name) }
	if changed("patch") {
		v, _ := fs.GetInt("patch")
		p.Patch = instrument.Some(v)
	}
	if changed("modes") {
		v, _ := fs.GetInt("modes")
		p.Modes = instrument.Some(v)
	}
	if changed("basis") {
		s, _ := fs.GetString("basis")
		k, err := modes.ParseKind(s)
		if err != nil {
			return p, fmt.Errorf("--basis: %w", err)
		}
		p.Basis = instrument.Some(k)
	}
	if changed("d-over-r0") {
		v, _ := fs.GetFloat64("d-over-r0")
		p.DOverR0 = instrument.Some(v)
	}
	return p, nil
}
