package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/internal/provenance"
	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/weights"
)

// predictOpts holds the flags of "pdwave predict".
var predictOpts struct {
	weights string
	site    string
	out     string
	turns   int
}

var predictCmd = &cobra.Command{
	Use:   "predict BURST --out FILE",
	Short: "Read the wavefront of every frame of a burst with the trained network",
	Long: `predict runs the trained network on one burst FITS file and writes the
wavefront coefficients of every frame, in rad, with the burst mean of tip and
tilt removed (the phase-diversity data cannot show it). The network reads
patches of the size its weights were trained for; of a larger burst it reads
the central patch, as "pdwave fit" does (full fields are the job of
"pdwave restore").

FILE receives a FITS table COEFFS in the layout of "pdwave fit" (columns
FRAME, NATIVE = basis coefficients, NOLL = Noll Zernike equivalents j = 2..)
and a CSV copy beside it (same name, .csv); if FILE ends in .csv only the
CSV is written.

Without --weights the built-in weights are used. The weights must have been
made for the burst's optics (from its header, or --site for bursts without
optics keywords); otherwise predict refuses and says what differs.`,
	Args: cobra.ExactArgs(1),
	RunE: predictRun,
}

func init() {
	f := predictCmd.Flags()
	addBurstFlags(predictCmd)
	f.StringVar(&predictOpts.weights, "weights", "", "weight file (default: built-in weights)")
	f.StringVar(&predictOpts.site, "site", "", "site file giving the optics of bursts without optics keywords")
	f.StringVar(&predictOpts.out, "out", "", "output table (FITS, plus a CSV copy; or .csv)")
	f.IntVar(&predictOpts.turns, "turns", infer.DefaultTurns, "average the network over 1, 4 or 8 symmetries of the square (turned bursts, turned back)")
	root.AddCommand(predictCmd)
}

func predictRun(cmd *cobra.Command, args []string) error {
	o := predictOpts
	if o.out == "" {
		return fmt.Errorf("predict: --out is required")
	}
	outs := productFiles(o.out)
	if strings.EqualFold(filepath.Ext(o.out), ".csv") {
		outs = outs[:1]
	}
	if err := checkFiles("predict", outs, args[0], o.weights, o.site); err != nil {
		return err
	}
	var (
		m    *net.Model
		from string
		err  error
	)
	if o.weights != "" {
		if m, err = net.Load(o.weights); err != nil {
			return err
		}
		from = o.weights
	} else {
		if m, err = weights.Default(); err != nil {
			return fmt.Errorf("predict: built-in weights: %w", err)
		}
		from = "built-in (" + weights.DefaultName + ")"
	}
	b, err := readBurst(args[0], cmd.ErrOrStderr())
	if err != nil {
		return err
	}
	src := instrument.Sources{Header: infer.HeaderInstrument(b.Optics)}
	if o.site != "" {
		st, err := site.Load(o.site)
		if err != nil {
			return err
		}
		src.Site = st.Instrument()
	}
	prov, err := runProvenance(m, append(burstInputs(args[0]),
		provenance.Input{Role: "weights", Path: o.weights}, provenance.Input{Role: "site", Path: o.site})...)
	if err != nil {
		return err
	}
	job := infer.PredictJob{Provenance: prov, Burst: b, Name: args[0], Sources: src, Model: m, From: from, Version: version, Out: o.out, Log: os.Stderr, Turns: o.turns}
	return job.Run()
}
