package infer

import (
	"encoding/csv"
	"fmt"
	"io"
	"strconv"
	"text/tabwriter"

	"pdwave/internal/atomicfile"
)

// studyColumns is the header of the study CSV. err_* are fractions of the
// true wavefront variance left as error (0 perfect, 1 = no correction);
// share_*_over_1 is the share of bursts with an error above 1.
var studyColumns = []string{"scene", "d_over_r0", "patch_px", "frames", "diversity_waves_pv", "bursts",
	"err_2_10_mean", "err_2_10_median", "err_2_10_sd", "err_2_10_max", "share_2_10_over_1",
	"err_2_21_mean", "err_2_21_median", "err_2_21_sd", "err_2_21_max", "share_2_21_over_1",
	"err_2_10_start", "seconds_per_fit", "iterations"}

// studyFloats returns pointers to the float columns of r after bursts, in
// studyColumns order.
func studyFloats(r *StudyRow) []*float64 {
	return []*float64{&r.Err10, &r.Err10Median, &r.Err10SD, &r.Err10Max, &r.Err10Over1,
		&r.Err21, &r.Err21Median, &r.Err21SD, &r.Err21Max, &r.Err21Over1,
		&r.Err10Start, &r.Seconds, &r.Iterations}
}

// WriteStudyCSV writes the rows as CSV with a header line (studyColumns),
// values to 4 significant digits.
func WriteStudyCSV(w io.Writer, rows []StudyRow) error {
	cw := csv.NewWriter(w)
	_ = cw.Write(studyColumns)
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', 4, 64) }
	for i := range rows {
		r := &rows[i]
		rec := []string{r.Scene, g(r.DOverR0), strconv.Itoa(r.Patch), strconv.Itoa(r.Frames), g(r.DiversityPV),
			strconv.Itoa(r.Bursts)}
		for _, p := range studyFloats(r) {
			rec = append(rec, g(*p))
		}
		_ = cw.Write(rec)
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("writing study table: %w", err)
	}
	return nil
}

// ReadStudyCSV reads a table written by WriteStudyCSV. It errors, with the
// line, on a header that differs or a value that does not parse.
func ReadStudyCSV(r io.Reader) ([]StudyRow, error) {
	cr := csv.NewReader(r)
	cr.FieldsPerRecord = len(studyColumns)
	recs, err := cr.ReadAll()
	if err != nil {
		return nil, fmt.Errorf("reading study table: %w", err)
	}
	if len(recs) == 0 {
		return nil, fmt.Errorf("reading study table: no header")
	}
	for i, h := range studyColumns {
		if recs[0][i] != h {
			return nil, fmt.Errorf("reading study table: column %d is %q, want %q", i+1, recs[0][i], h)
		}
	}
	rows := make([]StudyRow, len(recs)-1)
	for i, rec := range recs[1:] {
		if err := parseStudyRow(&rows[i], rec); err != nil {
			return nil, fmt.Errorf("reading study table, line %d: %w", i+2, err)
		}
	}
	return rows, nil
}

// parseStudyRow fills r from one record in studyColumns order; the first
// field that does not parse is reported.
func parseStudyRow(r *StudyRow, rec []string) error {
	r.Scene = rec[0]
	fl := append([]*float64{&r.DOverR0, nil, nil, &r.DiversityPV, nil}, studyFloats(r)...)
	in := []*int{nil, &r.Patch, &r.Frames, nil, &r.Bursts}
	for k := 1; k < len(rec); k++ {
		var err error
		if i := k - 1; i < len(in) && in[i] != nil {
			*in[i], err = strconv.Atoi(rec[k])
		} else {
			*fl[i], err = strconv.ParseFloat(rec[k], 64)
		}
		if err != nil {
			return fmt.Errorf("%s: %w", studyColumns[k], err)
		}
	}
	return nil
}

// WriteStudyFile writes the rows with WriteStudyCSV to path, through a
// temporary file in the same folder that is renamed into place (no partial
// file on error). Errors name the path.
func WriteStudyFile(path string, rows []StudyRow) error {
	return atomicfile.Write(path, func(w io.Writer) error { return WriteStudyCSV(w, rows) })
}

// WriteStudySummary writes the rows as an aligned text table, one line per
// case and scene: the case, the bursts, and for Noll 2–10 and 2–21 the
// mean, median and largest error and the share of bursts above 1 (as a
// percentage), then the mean time per fit.
func WriteStudySummary(w io.Writer, rows []StudyRow) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "scene\tD/r0\tpx\tframes\twaves\tbursts\t2–10 mean\tmedian\tmax\t>1\t2–21 mean\tmedian\tmax\t>1\ts/fit\t")
	for _, r := range rows {
		name := r.Scene
		if name == "" {
			name = "-"
		}
		fmt.Fprintf(tw, "%s\t%.1f\t%d\t%d\t%.1f\t%d\t%.3f\t%.3f\t%.3f\t%.0f%%\t%.3f\t%.3f\t%.3f\t%.0f%%\t%.2f\t\n",
			name, r.DOverR0, r.Patch, r.Frames, r.DiversityPV, r.Bursts,
			r.Err10, r.Err10Median, r.Err10Max, 100*r.Err10Over1,
			r.Err21, r.Err21Median, r.Err21Max, 100*r.Err21Over1, r.Seconds)
	}
	if err := tw.Flush(); err != nil {
		return fmt.Errorf("writing study summary: %w", err)
	}
	return nil
}
