// Command pdwave simulates, fits, learns and restores phase-diversity bursts
// of solar images. Each subcommand lives in its own file of this folder and
// registers itself on the root command in an init function; the physics lives
// in the packages below (model/, simulate/, train/, infer/).
package main

import (
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"pdwave/internal/provenance"
	"pdwave/model/burst"
	"pdwave/model/net"
)

// version is the program version recorded in every output file. It can be
// overridden at link time with -ldflags "-X main.version=...".
var version = "0.1.0-dev"

var root = &cobra.Command{
	Use:   "pdwave",
	Short: "Phase-diversity wavefront sensing and image restoration for solar bursts",
	Long: `pdwave turns bursts of short solar exposures, recorded in focus and with a
known defocus, into sharp images. It simulates bursts for a described telescope
and site, trains a small network on a CPU to read wavefront coefficients from
them, restores large fields fast, and checks the learned coefficients against
the classical multi-frame fit.`,
	SilenceUsage:  true,
	SilenceErrors: true,
	Version:       version,
}

func main() {
	if err := root.Execute(); err != nil {
		// One line, whatever the error: multi-line messages (YAML
		// decoders list one problem a line) are joined.
		msg := strings.Join(strings.Fields(strings.ReplaceAll(err.Error(), "\n", "; ")), " ")
		fmt.Fprintf(os.Stderr, "pdwave: %s\n", msg)
		code := 1
		var ec interface{ ExitCode() int }
		if errors.As(err, &ec) {
			code = ec.ExitCode()
		}
		os.Exit(code)
	}
}

// runProvenance returns what every output of this run records: the
// command line and the SHA-256 of the input files (provenance.Settings of
// os.Args and inputs), with "sha256 weights" of the weights m serialises
// to when m is non-nil and no weights file is among the inputs (the
// built-in weights).
func runProvenance(m *net.Model, inputs ...provenance.Input) (map[string]string, error) {
	s, err := provenance.Settings(os.Args, inputs...)
	if err != nil {
		return nil, err
	}
	if _, ok := s["sha256 weights"]; !ok && m != nil {
		if s["sha256 weights"], err = provenance.Hash(m.Write); err != nil {
			return nil, fmt.Errorf("weights: %w", err)
		}
	}
	return s, nil
}

// burstInputs returns the files of the burst reference ref
// (burst.SplitRef) as inputs of role "burst".
func burstInputs(ref string) []provenance.Input {
	var in []provenance.Input
	for _, f := range burst.SplitRef(ref) {
		in = append(in, provenance.Input{Role: "burst", Path: f})
	}
	return in
}
