package train

import (
	"fmt"
	"slices"
)

// Referee scores the network against the classical fit on part of the
// validation set. train does not import the fitter (both are verbs); the
// command line wires one in (cmd/pdwave uses infer.Fitter with its default
// settings).
type Referee interface {
	// Fit returns the classical estimate (frames × modes, native basis, rad)
	// for one burst, data[channel][frame].
	Fit(data [][][]float64) ([][]float64, error)
	// Objective returns the fitter's objective (metric + prior) of the
	// burst at coeffs.
	Objective(data [][][]float64, coeffs [][]float64) (float64, error)
}

// RefereeTolerance is the ratio of the learned to the fitted objective
// counted as agreement in Validation.FitWithin.
const RefereeTolerance = 1.5

// refereeSet is the fitted objective of the first bursts of a validation
// set, computed once per run.
type refereeSet struct {
	ref    Referee
	set    []*Sample
	fitted []float64
}

// newRefereeSet fits the first n bursts of set (fewer if set is shorter).
func newRefereeSet(ref Referee, set []*Sample, n int) (*refereeSet, error) {
	n = min(n, len(set))
	r := &refereeSet{ref: ref, set: set[:n], fitted: make([]float64, n)}
	for i, s := range r.set {
		data := [][][]float64{s.Data[0], s.Data[1]}
		c, err := ref.Fit(data)
		if err != nil {
			return nil, fmt.Errorf("train: classical fit of validation burst %d: %w", i, err)
		}
		if r.fitted[i], err = ref.Objective(data, c); err != nil {
			return nil, fmt.Errorf("train: objective of validation burst %d: %w", i, err)
		}
	}
	return r, nil
}

// score sets v.FitBursts, v.FitRatioMedian and v.FitWithin from the
// network's predictions for the referee's bursts.
func (r *refereeSet) score(t *Trainer, v *Validation) error {
	nm := t.prob.setup.Modes
	ratios := make([]float64, 0, len(r.set))
	for i, s := range r.set {
		flat, err := t.Predict(s.Data)
		if err != nil {
			return fmt.Errorf("train: validation burst %d: %w", i, err)
		}
		coeffs := make([][]float64, len(flat)/nm)
		for j := range coeffs {
			coeffs[j] = flat[j*nm : (j+1)*nm]
		}
		e, err := r.ref.Objective([][][]float64{s.Data[0], s.Data[1]}, coeffs)
		if err != nil {
			return fmt.Errorf("train: objective of validation burst %d: %w", i, err)
		}
		ratios = append(ratios, e/r.fitted[i])
	}
	if len(ratios) == 0 {
		return nil
	}
	slices.Sort(ratios)
	within := 0
	for _, q := range ratios {
		if q <= RefereeTolerance {
			within++
		}
	}
	v.FitBursts = len(ratios)
	v.FitRatioMedian = median(ratios)
	v.FitWithin = float64(within) / float64(len(ratios))
	return nil
}

// median returns the median of sorted, non-empty a.
func median(a []float64) float64 {
	n := len(a)
	if n%2 == 1 {
		return a[n/2]
	}
	return (a[n/2-1] + a[n/2]) / 2
}
