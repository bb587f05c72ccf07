package infer

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"strconv"

	"pdwave/model/burst"
)

// StudyCase is one point of the accuracy study.
type StudyCase struct {
	DOverR0     float64 // true D/r0 of the simulated bursts (the fit assumes the same)
	Patch       int     // patch side, pixels
	Frames      int     // frames per burst
	DiversityPV float64 // defocus of channel 1, waves peak-to-valley
}

// StudyRow is the result for one StudyCase over several bursts.
type StudyRow struct {
	StudyCase
	Bursts     int     // bursts fitted for this case
	Err10      float64 // mean fraction of the wavefront variance left as error, Noll 2–10 (burst-mean tilt removed)
	Err10SD    float64 // its standard deviation over bursts
	Err21      float64 // the same over Noll 2–21
	Err21SD    float64 // its standard deviation over bursts
	Err10Start float64 // the same for the starting point (registered tilts, else zero): what the fit gained
	Seconds    float64 // mean wall time per fit, s
	Iterations float64 // mean L-BFGS iterations
}

// BurstSource draws one burst with truth for a study case: data
// [channel][frame] N×N and the true Noll coefficients (frames × ≥ 20,
// j = 2…), rad.
type BurstSource func(c StudyCase, rng *rand.Rand) (data [][][]float64, noll [][]float64, err error)

// SyntheticSource returns a BurstSource based on Synthetic with the given
// telescope (the case sets N, frames, diversity and D/r0), Noll modes up to
// jmax and photons per pixel.
func SyntheticSource(base Synthetic) BurstSource {
	return func(c StudyCase, rng *rand.Rand) ([][][]float64, [][]float64, error) {
		s := base
		s.N, s.Frames, s.DOverR0 = c.Patch, c.Frames, c.DOverR0
		s.DiversityPV = []float64{0, c.DiversityPV}
		b, err := s.Burst(rng)
		if err != nil {
			return nil, nil, err
		}
		return b.Data, b.Noll, nil
	}
}

// Study runs the accuracy study: for every case, bursts bursts are drawn
// from src (seeded from seed, case index and burst index, so results do
// not depend on the worker count), fitted with base adapted to the case
// (patch, frames, diversity, D/r0), and the residual fractions averaged.
// progress, if not nil, is called after each case.
func Study(base Config, cases []StudyCase, bursts int, src BurstSource, seed uint64, workers int, progress func(StudyRow)) ([]StudyRow, error) {
	if bursts < 1 {
		return nil, fmt.Errorf("study: need at least one burst per case, got %d", bursts)
	}
	rows := make([]StudyRow, 0, len(cases))
	for ci, c := range cases {
		cfg := base
		cfg.Patch, cfg.Frames, cfg.DOverR0 = c.Patch, c.Frames, c.DOverR0
		cfg.DiversityPV = []float64{0, c.DiversityPV}
		f, err := NewFitter(cfg)
		if err != nil {
			return rows, fmt.Errorf("study case %+v: %w", c, err)
		}
		patches := make([]Patch, bursts)
		truths := make([][][]float64, bursts)
		for b := range patches {
			rng := rand.New(rand.NewPCG(seed, uint64(ci)<<20|uint64(b)))
			d, t, err := src(c, rng)
			if err != nil {
				return rows, fmt.Errorf("study case %+v burst %d: %w", c, b, err)
			}
			patches[b].Data, truths[b] = d, t
		}
		res, err := f.FitAll(patches, workers)
		if err != nil {
			return rows, fmt.Errorf("study case %+v: %w", c, err)
		}
		row := StudyRow{StudyCase: c, Bursts: bursts}
		var e10, e21 []float64
		for b, r := range res {
			a, err := ResidualFraction(r.Noll, truths[b], 10)
			if err != nil {
				return rows, fmt.Errorf("study case %+v: %w", c, err)
			}
			a2, err := ResidualFraction(r.Noll, truths[b], 21)
			if err != nil {
				return rows, fmt.Errorf("study case %+v: %w", c, err)
			}
			s0, err := ResidualFraction(r.StartNoll, truths[b], 10)
			if err != nil {
				return rows, fmt.Errorf("study case %+v: %w", c, err)
			}
			e10, e21 = append(e10, a), append(e21, a2)
			row.Err10Start += s0 / float64(bursts)
			row.Seconds += r.Elapsed.Seconds() / float64(bursts)
			row.Iterations += float64(r.Iterations) / float64(bursts)
		}
		row.Err10, row.Err10SD = meanSD(e10)
		row.Err21, row.Err21SD = meanSD(e21)
		rows = append(rows, row)
		if progress != nil {
			progress(row)
		}
	}
	return rows, nil
}

func meanSD(x []float64) (m, sd float64) {
	for _, v := range x {
		m += v
	}
	m /= float64(len(x))
	if len(x) < 2 {
		return m, 0
	}
	for _, v := range x {
		sd += (v - m) * (v - m)
	}
	return m, math.Sqrt(sd / float64(len(x)-1))
}

// StudyGrid returns the default study cases: one-at-a-time scans around
// the reference case (D/r0 = 5, 64 px, 16 frames, 1 wave): D/r0 2…10,
// patch 48…128, frames 4…32, diversity 0.5…2 waves.
func StudyGrid() []StudyCase {
	ref := StudyCase{DOverR0: 5, Patch: 64, Frames: 16, DiversityPV: 1}
	cases := []StudyCase{ref}
	for _, v := range []float64{2, 3, 7, 10} {
		c := ref
		c.DOverR0 = v
		cases = append(cases, c)
	}
	for _, v := range []int{48, 96, 128} {
		c := ref
		c.Patch = v
		cases = append(cases, c)
	}
	for _, v := range []int{4, 8, 32} {
		c := ref
		c.Frames = v
		cases = append(cases, c)
	}
	for _, v := range []float64{0.5, 1.5, 2} {
		c := ref
		c.DiversityPV = v
		cases = append(cases, c)
	}
	return cases
}

// WriteStudyCSV writes the rows as CSV with a header line.
func WriteStudyCSV(w io.Writer, rows []StudyRow) error {
	cw := csv.NewWriter(w)
	_ = cw.Write([]string{"d_over_r0", "patch_px", "frames", "diversity_waves_pv", "bursts",
		"err_2_10", "err_2_10_sd", "err_2_21", "err_2_21_sd", "err_2_10_start", "seconds_per_fit", "iterations"})
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', 4, 64) }
	for _, r := range rows {
		_ = cw.Write([]string{g(r.DOverR0), strconv.Itoa(r.Patch), strconv.Itoa(r.Frames), g(r.DiversityPV),
			strconv.Itoa(r.Bursts), g(r.Err10), g(r.Err10SD), g(r.Err21), g(r.Err21SD), g(r.Err10Start),
			g(r.Seconds), g(r.Iterations)})
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("writing study table: %w", err)
	}
	return nil
}

// WriteStudyFile writes the rows with WriteStudyCSV to path, through a
// temporary file in the same folder that is renamed into place (no partial
// file on error). Errors name the path.
func WriteStudyFile(path string, rows []StudyRow) error {
	if err := burst.WriteAtomic(path, func(w io.Writer) error { return WriteStudyCSV(w, rows) }); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}
