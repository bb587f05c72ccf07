package restore

import (
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"

	"pdwave/internal/atomicfile"
)

// A series is a job of several bursts restored into one folder. Bursts
// whose product is already there, made from the same file contents,
// weights and flags (the "request" setting of its summary), are skipped;
// after every burst SeriesFile in the folder lists the series' products.

// SeriesFile is the summary CSV of a series, in the output folder.
const SeriesFile = "series.csv"

// request returns the digest of what the job asks of unit u before any
// work: the content hashes of its files (and of the dark, flat and site
// files), of the weights it may use, and the flags that shape the result.
// A product whose summary records the same digest need not be made again.
func (j *Job) request(u unit) (string, error) {
	h := sha256.New()
	for _, p := range append(append([]string{u.a, u.b}, j.Calib.Paths()...), j.SiteFile) {
		s := ""
		if p != "" {
			var err error
			if s, err = j.hash(p); err != nil {
				return "", err
			}
		}
		fmt.Fprintln(h, s)
	}
	if j.Model != nil && !j.Fit {
		if j.weightsHash == "" {
			w, err := HashWeights(j.Model)
			if err != nil {
				return "", err
			}
			j.weightsHash = w
		}
		fmt.Fprintln(h, j.weightsHash)
	}
	off := "measure"
	if j.Offset != nil {
		off = fmt.Sprintf("%g,%g", j.Offset.DX, j.Offset.DY)
	}
	// Not the shard: a merged product equals a single run's.
	fmt.Fprintln(h, fmt.Sprintf("%+v", j.Flags), j.Overlap, j.Polish, max(j.Turns, 1), j.Fit, j.NoAlign, off, j.ModelOptional)
	return hex.EncodeToString(h.Sum(nil)), nil
}

// readSummary reads the JSON summary beside the product out (nil without
// one).
func readSummary(out string) (*Summary, error) {
	b, err := os.ReadFile(SidecarBase(out) + "_summary.json")
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	var s Summary
	if err := json.Unmarshal(b, &s); err != nil {
		return nil, fmt.Errorf("reading %s: %w", SidecarBase(out)+"_summary.json", err)
	}
	return &s, nil
}

// done reports whether the product of unit u exists with every file of
// the set and was made for the same request req.
func (j *Job) done(u unit, req string) bool {
	for _, p := range ProductPaths(u.out) {
		if _, err := os.Stat(p); err != nil {
			return false
		}
	}
	s, err := readSummary(u.out)
	return err == nil && s != nil && s.Settings["request"] == req
}

// writeSeries writes SeriesFile in the output folder: one row per burst of
// the series whose product exists (burst, product, patches, failed
// patches, median restored and raw contrast, median metric ratio,
// estimator, channel offset), in the order given.
func (j *Job) writeSeries(units []unit) error {
	return atomicfile.Write(filepath.Join(j.Out, SeriesFile), func(w io.Writer) error {
		cw := csv.NewWriter(w)
		cw.Write([]string{"burst", "product", "patches", "failed", "median_contrast", "median_raw_contrast", "median_metric_over_noise", "estimator", "shift_x_px", "shift_y_px"})
		for _, u := range units {
			s, err := readSummary(u.out)
			if err != nil {
				return err
			}
			if s == nil {
				continue
			}
			cw.Write([]string{u.name, filepath.Base(u.out), strconv.Itoa(s.Patches), strconv.Itoa(s.Flagged["failed"]),
				formatFloat(s.MedianContrast), formatFloat(s.MedianRawContrast), formatFloat(s.MedianMetricRatio),
				s.Estimator, formatFloat(s.ShiftX), formatFloat(s.ShiftY)})
		}
		cw.Flush()
		return cw.Error()
	})
}
