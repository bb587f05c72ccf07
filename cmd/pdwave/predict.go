package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/model/fits"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/weights"
)

// predictOpts holds the flags of "pdwave predict".
var predictOpts struct {
	weights string
	site    string
	out     string
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
	if _, _, _, err := infer.ConfigWithWeights(src, b.Frames, m, false); err != nil {
		return fmt.Errorf("predict: %s: %w; add the header keywords or give --site", args[0], err)
	}
	n := m.Meta.Patch
	if b.Nx < n || b.Ny < n {
		return fmt.Errorf("predict: %s is %d×%d px, smaller than the %d px patches the weights read", args[0], b.Nx, b.Ny, n)
	}
	x0, y0 := (b.Nx-n)/2, (b.Ny-n)/2
	if b.Nx > n || b.Ny > n {
		fmt.Fprintf(os.Stderr, "burst is %d×%d pixels: reading its central %d×%d patch at (%d, %d); restore full fields with \"pdwave restore\"\n",
			b.Nx, b.Ny, n, n, x0, y0)
	}
	p := b.Patch(x0, y0, n)
	est, err := net.NewEstimator(m)
	if err != nil {
		return err
	}
	start := time.Now()
	native, noll, err := est.Burst([2][][]float64{p[0], p[1]})
	if err != nil {
		return fmt.Errorf("predict: %s: %w", args[0], err)
	}
	elapsed := time.Since(start)
	settings := map[string]string{"verb": "predict", "burst": filepath.Base(args[0]), "weights": from,
		"site": m.Meta.Site, "basis": m.Meta.Basis, "seconds": fmt.Sprintf("%.6f", elapsed.Seconds()),
		"patch": fmt.Sprintf("%d px at (%d, %d) of %d×%d", n, x0, y0, b.Nx, b.Ny)}
	table := &infer.CoefficientTable{Basis: modes.Kind(m.Meta.Basis), Native: native, Noll: noll,
		Title: "pdwave " + version + " predict", Settings: settings}
	if strings.EqualFold(filepath.Ext(o.out), ".csv") {
		if err := table.WriteCSV(o.out); err != nil {
			return err
		}
	} else {
		hdu := table.HDU()
		hdu.Cards = append(hdu.Cards,
			fits.Card{Key: "NMODES", Value: len(native[0]), Comment: "modes per frame, piston excluded"},
			fits.Card{Key: "ESTIMATR", Value: "network", Comment: "learned estimate (no fit)"},
			fits.Card{Key: "PATCHX0", Value: x0, Comment: "first column of the patch in the burst (0-based)"},
			fits.Card{Key: "PATCHY0", Value: y0, Comment: "first row of the patch in the burst (0-based)"})
		primary := &fits.Image{Cards: fits.Provenance(version, settings)}
		if _, err := infer.WriteProduct(o.out, []fits.HDU{primary, hdu}, table); err != nil {
			return err
		}
	}
	fmt.Fprintf(os.Stderr, "predicted %d frames × %d %s modes in %s (one burst, set-up included) with weights %s\n",
		len(native), len(native[0]), m.Meta.Basis, elapsed.Round(time.Microsecond), from)
	return nil
}
