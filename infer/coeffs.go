package infer

import (
	"fmt"
	"io"
	"maps"
	"path/filepath"
	"slices"
	"strings"

	"pdwave/internal/atomicfile"
	"pdwave/model/fits"
	"pdwave/model/modes"
)

// CoefficientTable is the per-frame wavefront table of a fit or prediction,
// written by WriteCoefficients (FITS binary table COEFFS with columns FRAME,
// NATIVE, NOLL) and WriteCSV.
type CoefficientTable struct {
	Basis  modes.Kind  // basis of Native
	Native [][]float64 // frames × modes, native basis, rad
	Noll   [][]float64 // frames × modes, Noll equivalents (Noll j = 2 + index), rad

	// The CSV starts with comment lines: "# Title", then "# key: value" for
	// every setting in key order, then "# line" for every note.
	Title    string            // first comment line, e.g. "pdwave 0.1 fit"
	Settings map[string]string // "# key: value" lines, in key order
	Notes    []string          // further comment lines, e.g. Result.Notes
}

// HDU returns the FITS binary table COEFFS: FRAME (1-based, integer), NATIVE
// and NOLL (rad, one vector of modes per frame), with the cards FITBASIS
// (basis of NATIVE) and NOLLJ0 = 2 (Noll index of the first NOLL element).
// The table shares the coefficient slices of t.
func (t *CoefficientTable) HDU() *fits.Table {
	frames := make([]int64, len(t.Native))
	for j := range frames {
		frames[j] = int64(j + 1)
	}
	return &fits.Table{
		Name: "COEFFS",
		Columns: []fits.Column{
			{Name: "FRAME", Int: frames},
			{Name: "NATIVE", Unit: "rad", Float: t.Native},
			{Name: "NOLL", Unit: "rad", Float: t.Noll},
		},
		Cards: []fits.Card{
			{Key: "FITBASIS", Value: string(t.Basis), Comment: "basis of NATIVE"},
			{Key: "NOLLJ0", Value: 2, Comment: "Noll index of the first NOLL element"},
		},
	}
}

// WriteCSV writes the table as CSV to path: the comment lines (see
// CoefficientTable), a header "frame,native_1,…,native_M,noll_2,…,noll_M+1"
// and one row per frame (frame number from 1, values %.6g in rad). The file
// is written to a temporary name in the same folder and renamed, so no
// partial file is left on error.
func (t *CoefficientTable) WriteCSV(path string) error {
	return atomicfile.Write(path, t.writeCSV)
}

// writeCSV writes the CSV of WriteCSV to w.
func (t *CoefficientTable) writeCSV(w io.Writer) error {
	var b strings.Builder
	fmt.Fprintf(&b, "# %s\n", t.Title)
	for _, k := range slices.Sorted(maps.Keys(t.Settings)) {
		fmt.Fprintf(&b, "# %s: %s\n", k, t.Settings[k])
	}
	for _, n := range t.Notes {
		fmt.Fprintf(&b, "# %s\n", n)
	}
	m := 0
	if len(t.Native) > 0 {
		m = len(t.Native[0])
	}
	b.WriteString("frame")
	for k := 0; k < m; k++ {
		fmt.Fprintf(&b, ",native_%d", k+1)
	}
	for k := 0; k < m; k++ {
		fmt.Fprintf(&b, ",noll_%d", k+2)
	}
	b.WriteByte('\n')
	for j := range t.Native {
		fmt.Fprintf(&b, "%d", j+1)
		for _, v := range t.Native[j] {
			fmt.Fprintf(&b, ",%.6g", v)
		}
		for _, v := range t.Noll[j] {
			fmt.Fprintf(&b, ",%.6g", v)
		}
		b.WriteByte('\n')
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// CSVPath returns the name of the CSV written next to the FITS file
// fitsPath: its extension replaced by ".csv".
func CSVPath(fitsPath string) string {
	return strings.TrimSuffix(fitsPath, filepath.Ext(fitsPath)) + ".csv"
}

// WriteCoefficients writes the FITS product fitsPath (primary image, then the
// COEFFS table of t.HDU) and the same coefficients as CSV to CSVPath(fitsPath)
// (t.WriteCSV). It returns the CSV path.
func WriteCoefficients(fitsPath string, primary *fits.Image, t *CoefficientTable) (csvPath string, err error) {
	return WriteProduct(fitsPath, []fits.HDU{primary, t.HDU()}, t)
}

// WriteProduct writes the FITS file fitsPath of the HDUs and the CSV of t
// at CSVPath(fitsPath) as one atomicfile.Set: both appear together or
// neither does (the FITS file is renamed last). It returns the CSV path.
func WriteProduct(fitsPath string, hdus []fits.HDU, t *CoefficientTable) (csvPath string, err error) {
	csvPath = CSVPath(fitsPath)
	set := atomicfile.NewSet()
	defer set.Abort()
	if err := set.Add(csvPath, t.writeCSV); err != nil {
		return "", err
	}
	if err := set.AddPath(fitsPath, func(tmp string) error { return fits.WriteFile(tmp, hdus...) }); err != nil {
		return "", err
	}
	return csvPath, set.Commit()
}

// Notes returns the CSV comment lines that summarise a fit: the objective and
// the normalised metric before and after (%.8g), the iterations and the wall
// time in seconds, the guard's PriorChi2 and flags ("none" when it found
// nothing), and the fitted channel offset when it was fitted.
func (r *Result) Notes() []string {
	flags := r.Flags.String()
	if flags == "" {
		flags = "none"
	}
	return []string{
		fmt.Sprintf("prior_chi2: %.4g", r.Chi2),
		"fit_flags: " + flags,
		fmt.Sprintf("channel_offset_px: %.4f %.4f", r.ChannelOffset[0], r.ChannelOffset[1]),
		fmt.Sprintf("metric_before: %.8g", r.MetricStart),
		fmt.Sprintf("metric_after: %.8g", r.MetricEnd),
		fmt.Sprintf("data_metric_before: %.8g", r.DataStart),
		fmt.Sprintf("data_metric_after: %.8g", r.DataEnd),
		fmt.Sprintf("exact_edge_objective_after: %.8g", r.ExactEnd),
		fmt.Sprintf("iterations: %d", r.Iterations),
		fmt.Sprintf("seconds: %.3f", r.Elapsed.Seconds()),
	}
}
