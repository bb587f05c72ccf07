package main

import (
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"pdwave/model/burst"
	"pdwave/model/site"
)

// burstHDUs is the --hdu flag of the commands that read bursts.
var burstHDUs []string

// burstCmd is the running command that reads bursts (set before it runs),
// whose --site file gives the camera geometry.
var burstCmd *cobra.Command

// addBurstFlags registers --hdu on a command that reads bursts, and notes
// the command when it runs so that its --site file's camera geometry is
// applied to every burst it reads (burstOptions).
func addBurstFlags(c *cobra.Command) {
	c.Flags().StringSliceVar(&burstHDUs, "hdu", nil,
		"image HDU holding the burst, an EXTNAME or 0-based index; two (focused,defocused) when each channel has its own; default: the first non-empty image")
	prev := c.PreRunE
	c.PreRunE = func(cmd *cobra.Command, args []string) error {
		burstCmd = cmd
		if prev != nil {
			return prev(cmd, args)
		}
		return nil
	}
}

// burstOptions returns the reading options the flags ask for: the image
// HDUs and the camera geometry of the --site file (site.CameraGeometry).
func burstOptions() burst.Options {
	return burst.Options{HDUs: burstHDUs, Geometry: burstGeometry()}
}

// burstGeometry returns the camera geometry of the running command's
// --site file, or the zero geometry without one. A site file that does
// not load gives the zero geometry here: the command itself loads it and
// reports why.
func burstGeometry() burst.Geometry {
	if burstCmd == nil {
		return burst.Geometry{}
	}
	f := burstCmd.Flags().Lookup("site")
	if f == nil || f.Value.String() == "" {
		return burst.Geometry{}
	}
	st, err := site.Load(f.Value.String())
	if err != nil {
		return burst.Geometry{}
	}
	return st.CameraGeometry()
}

// readBurst reads the burst named by ref, a file or several files joined
// with '+' (burst.ReadRef), with the reading options of the flags
// (burstOptions: HDUs, camera geometry), and prints the reader's notes
// (geometry applied, pixels filled, ...) to w.
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
