package main

import (
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"pdwave/model/burst"
)

// burstHDUs is the --hdu flag of the commands that read bursts.
var burstHDUs []string

// addBurstFlags registers --hdu on a command that reads bursts.
func addBurstFlags(c *cobra.Command) {
	c.Flags().StringSliceVar(&burstHDUs, "hdu", nil,
		"image HDU holding the burst, an EXTNAME or 0-based index; two (focused,defocused) when each channel has its own; default: the first non-empty image")
}

// burstOptions returns the reading options the flags ask for.
func burstOptions() burst.Options { return burst.Options{HDUs: burstHDUs} }

// readBurst reads the burst named by ref, a file or several files joined
// with '+' (burst.ReadRef), and prints the reader's notes to w.
func readBurst(ref string, w io.Writer) (*burst.Burst, error) {
	b, err := burst.ReadRef(ref, burstOptions())
	if err != nil {
		return nil, err
	}
	for _, n := range b.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
	return b, nil
}
