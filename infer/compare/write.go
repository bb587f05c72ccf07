package compare

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"pdwave/internal/atomicfile"
	"pdwave/internal/outpath"
)

// Output file names inside the folder written by WriteDir.
const (
	FileHTML         = "index.html"
	FileReportJSON   = "report.json"
	FilePatchesJSON  = "patches.json"
	FileModesJSON    = "modes.json"
	FileCoeffsCSV    = "coefficients.csv"
	FilePatchesCSV   = "patches.csv"
	FileModesCSV     = "modes.csv"
	FileSpectraCSV   = "spectra.csv"
	FigCoeffs        = "coefficients.png"
	FigScatter       = "scatter.png"
	FigRMSDiff       = "rms_difference.png"
	FigWavefront     = "wavefront_psf.png"
	FigSpectra       = "spectra.png"
	FigRatioMap      = "ratio_map.png"
	FigFlagMap       = "flag_map.png"
	figureWidthInch  = 7
	figureHeightInch = 4.5
)

func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// Index base of every table pdwave writes: patches, frames and modes are
// numbered from 1 (as FITS numbers its axes); pixel origins x0, y0 are
// 0-based offsets from the field's first pixel.

// WriteCoefficientsCSV writes one row per patch, frame and mode: the
// coefficient of every series (rad) and every difference of
// r.Summary.Pairs. Call Summarise first.
func WriteCoefficientsCSV(w io.Writer, r *Report) error {
	cw := csv.NewWriter(w)
	head := []string{"patch", "x0", "y0", "frame", "mode"}
	for _, s := range r.Summary.Series {
		head = append(head, s)
	}
	for _, p := range r.Summary.Pairs {
		head = append(head, p.A+"_minus_"+p.B)
	}
	if err := cw.Write(head); err != nil {
		return err
	}
	row := make([]string, len(head))
	for i := range r.Patches {
		p := &r.Patches[i]
		ser := make([]*Estimate, len(r.Summary.Series))
		for k, s := range r.Summary.Series {
			ser[k] = p.Find(s)
		}
		prs := make([][2]*Estimate, len(r.Summary.Pairs))
		for k, pr := range r.Summary.Pairs {
			prs[k] = [2]*Estimate{p.Find(pr.A), p.Find(pr.B)}
		}
		for f := 0; f < r.Frames; f++ {
			for m := 0; m < r.Modes; m++ {
				row = row[:0]
				row = append(row, strconv.Itoa(p.Index+1), strconv.Itoa(p.X), strconv.Itoa(p.Y), strconv.Itoa(f+1), strconv.Itoa(m+1))
				for _, e := range ser {
					row = append(row, ftoa(e.Coeffs[f][m]))
				}
				for _, ab := range prs {
					row = append(row, ftoa(ab[0].Coeffs[f][m]-ab[1].Coeffs[f][m]))
				}
				if err := cw.Write(row); err != nil {
					return err
				}
			}
		}
	}
	cw.Flush()
	return cw.Error()
}

// WritePatchesCSV writes one row per patch: raw contrast, signal share
// (empty without a learned estimate), and per method the
// metric, restored contrast, stage and total seconds, iterations, then the
// metric ratio of each method to the fit, then the flags (";"-separated).
// Call Summarise first.
func WritePatchesCSV(w io.Writer, r *Report) error {
	cw := csv.NewWriter(w)
	head := []string{"patch", "x0", "y0", "raw_contrast", "signal_share"}
	for _, m := range r.Methods {
		head = append(head, "metric_"+m, "contrast_"+m, "seconds_"+m, "total_seconds_"+m, "iterations_"+m)
	}
	for _, m := range r.Summary.RatioMethods {
		head = append(head, "objective_ratio_"+m+"_"+Fitted)
	}
	head = append(head, "flags")
	if err := cw.Write(head); err != nil {
		return err
	}
	for i := range r.Patches {
		p := &r.Patches[i]
		share := ""
		if p.SignalShare != nil {
			share = ftoa(*p.SignalShare)
		}
		row := []string{strconv.Itoa(p.Index + 1), strconv.Itoa(p.X), strconv.Itoa(p.Y), ftoa(p.RawContrast), share}
		for _, e := range p.Estimates {
			row = append(row, ftoa(e.Metric), ftoa(e.Contrast), ftoa(e.Seconds), ftoa(e.Total), strconv.Itoa(e.Iterations))
		}
		for k := range r.Summary.RatioMethods {
			row = append(row, ftoa(r.Summary.Ratios[k][i].Value))
		}
		row = append(row, strings.Join(p.Flags, ";"))
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteModesCSV writes one row per mode: rms and spread over patches of
// every series, then the rms of every difference pair (rad). Call Summarise
// first.
func WriteModesCSV(w io.Writer, r *Report) error {
	cw := csv.NewWriter(w)
	head := []string{"mode"}
	for _, s := range r.Summary.Series {
		head = append(head, "rms_"+s, "spread_"+s)
	}
	for _, p := range r.Summary.Pairs {
		head = append(head, "rms_"+p.A+"_minus_"+p.B)
	}
	if err := cw.Write(head); err != nil {
		return err
	}
	for _, st := range r.Summary.Modes {
		row := []string{strconv.Itoa(st.Mode)}
		for k := range r.Summary.Series {
			row = append(row, ftoa(st.RMS[k]), ftoa(st.Spread[k]))
		}
		for k := range r.Summary.Pairs {
			row = append(row, ftoa(st.DiffRMS[k]))
		}
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteSpectraCSV writes the azimuthally averaged power spectra: frequency
// (cycles per pixel) and one column per series. Writes only the header if
// r.Spectra is nil.
func WriteSpectraCSV(w io.Writer, r *Report) error {
	cw := csv.NewWriter(w)
	head := []string{"freq"}
	if r.Spectra == nil {
		if err := cw.Write(head); err != nil {
			return err
		}
		cw.Flush()
		return cw.Error()
	}
	head = append(head, r.Spectra.Series...)
	if err := cw.Write(head); err != nil {
		return err
	}
	for b, f := range r.Spectra.Freq {
		row := []string{ftoa(f)}
		for k := range r.Spectra.Series {
			row = append(row, ftoa(r.Spectra.Power[k][b]))
		}
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteJSON writes v as indented JSON.
func WriteJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", " ")
	return enc.Encode(v)
}

// Outputs renders every output file of the report in memory: name → bytes
// (CSV, JSON, PNG figures and the HTML page). It runs Summarise first.
func Outputs(r *Report) (map[string][]byte, error) {
	if err := Summarise(r); err != nil {
		return nil, err
	}
	out := map[string][]byte{}
	type writer struct {
		name string
		fn   func(io.Writer) error
	}
	ws := []writer{
		{FileCoeffsCSV, func(w io.Writer) error { return WriteCoefficientsCSV(w, r) }},
		{FilePatchesCSV, func(w io.Writer) error { return WritePatchesCSV(w, r) }},
		{FileModesCSV, func(w io.Writer) error { return WriteModesCSV(w, r) }},
		{FileSpectraCSV, func(w io.Writer) error { return WriteSpectraCSV(w, r) }},
		{FileReportJSON, func(w io.Writer) error { return WriteJSON(w, r) }},
		{FilePatchesJSON, func(w io.Writer) error { return WriteJSON(w, r.Patches) }},
		{FileModesJSON, func(w io.Writer) error {
			return WriteJSON(w, struct {
				Series []string   `json:"series"`
				Pairs  []Pair     `json:"pairs"`
				Modes  []ModeStat `json:"modes"`
			}{r.Summary.Series, r.Summary.Pairs, r.Summary.Modes})
		}},
	}
	for _, wr := range ws {
		var buf bytes.Buffer
		if err := wr.fn(&buf); err != nil {
			return nil, fmt.Errorf("writing %s: %w", wr.name, err)
		}
		out[wr.name] = buf.Bytes()
	}
	figs, err := Figures(r)
	if err != nil {
		return nil, err
	}
	for _, f := range figs {
		out[f.Name] = f.PNG
	}
	page, err := HTML(r, figs)
	if err != nil {
		return nil, err
	}
	out[FileHTML] = page
	return out, nil
}

// WriteDir writes every output of the report (see Outputs) into the folder
// dir, with the manifest of internal/outpath listing them. The folder is
// built under a temporary name in the same parent folder and renamed into
// place, so readers never see a partial folder. An existing dir is replaced
// only if pdwave wrote everything in it (outpath.Replaceable; any other
// non-empty folder is refused): it is first renamed aside and removed after
// the new one is in place. Errors leave any existing dir untouched.
func WriteDir(dir string, r *Report) error {
	files, err := Outputs(r)
	if err != nil {
		return err
	}
	dir = filepath.Clean(dir)
	parent, base := filepath.Split(dir)
	if parent == "" {
		parent = "."
	}
	tmp, err := os.MkdirTemp(parent, "."+base+".tmp-")
	if err != nil {
		return fmt.Errorf("writing %s: %w", dir, err)
	}
	fail := func(err error) error {
		os.RemoveAll(tmp)
		return fmt.Errorf("writing %s: %w", dir, err)
	}
	for name, data := range files {
		if err := atomicfile.WriteBytes(filepath.Join(tmp, name), data); err != nil {
			return fail(err)
		}
	}
	if err := outpath.WriteManifest(tmp); err != nil {
		return fail(err)
	}
	if err := os.Chmod(tmp, atomicfile.DirMode()); err != nil {
		return fail(err)
	}
	if err := outpath.Replaceable("compare", dir); err != nil {
		os.RemoveAll(tmp)
		return err
	}
	var old string
	if st, err := os.Lstat(dir); err == nil {
		if !st.IsDir() {
			return fail(fmt.Errorf("%s exists and is not a folder", dir))
		}
		old = tmp + ".old"
		if err := os.Rename(dir, old); err != nil {
			return fail(err)
		}
	}
	if err := os.Rename(tmp, dir); err != nil {
		if old != "" {
			os.Rename(old, dir)
		}
		return fail(err)
	}
	if old != "" {
		if err := os.RemoveAll(old); err != nil {
			return fmt.Errorf("removing previous %s: %w", old, err)
		}
	}
	return nil
}
