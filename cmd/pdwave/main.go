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
