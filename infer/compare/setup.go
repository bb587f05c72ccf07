package compare

import (
	"fmt"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/optics"
)

// Setup is what a comparison of burst b compares: the fit configuration
// resolved with the weights and the learned estimator in the fit's basis
// (nil when there is none to use), with the notes saying what was dropped
// or assumed.
type Setup struct {
	Fit     infer.Config
	Learned infer.Estimator
	Model   *net.Model // the network behind Learned; nil without one
	Notes   []string
}

// Weights are the network to compare: Model (not nil), loaded from Name; Builtin says they were not asked for, so weights that do not fit
// the data are dropped with a note instead of being an error.
type Weights struct {
	Model   *net.Model
	Name    string
	Builtin bool
	// Turns is how many symmetries of the square the learned estimate
	// averages over (infer.NetEstimator.SetTurns: 1, 4 or 8; 0 = 1), as
	// restore's --turns, so that both judge the same estimate.
	Turns int
}

// Resolve resolves the comparison of b from the instrument sources src and
// the weights w (infer.ConfigWithWeights), with the full fit's iteration
// budget and prior weight. It errors if the prior is negative or NaN, the
// field is smaller than one patch, the patch does not sample the pupil, or
// weights given explicitly do not fit. w.Model must not be nil.
func Resolve(src instrument.Sources, b *burst.Burst, w Weights, iterations int, prior float64) (Setup, error) {
	var s Setup
	cfg, used, note, err := infer.ConfigWithWeights(src, b.Frames, w.Model, w.Builtin)
	if err != nil {
		return s, fmt.Errorf("compare: %w", err)
	}
	s.Fit = cfg
	if used {
		s.Model = w.Model
	} else {
		s.Notes = []string{"Built-in weights not used: " + note}
	}
	if err := s.finishFit(b, iterations, prior); err != nil {
		return s, err
	}
	fitter, err := infer.NewFitter(s.Fit)
	if err != nil {
		return s, fmt.Errorf("compare: %w", err)
	}
	if s.Model == nil {
		return s, nil
	}
	est, err := NewNetEstimator(s.Model, fitter.Basis())
	if err != nil {
		if !w.Builtin {
			return s, fmt.Errorf("compare: %s: %w", w.Name, err)
		}
		s.Model, s.Notes = nil, append(s.Notes, "Built-in weights not used: "+err.Error())
		return s, nil
	}
	if err := est.SetTurns(max(w.Turns, 1)); err != nil {
		return s, fmt.Errorf("compare: %w", err)
	}
	s.Learned = est
	return s, nil
}

// finishFit sets the fit's iteration budget and prior weight (noting the
// assumed D/r0 when no seeing is known) and checks that the field holds one
// patch and the patch samples the pupil.
func (s *Setup) finishFit(b *burst.Burst, iterations int, prior float64) error {
	fc := &s.Fit
	fc.Stop.Iterations = iterations
	if fc.Notes["d_over_r0"] == instrument.FromDefault {
		s.Notes = append(s.Notes, fmt.Sprintf("No site seeing given: the prior assumes D/r0 = %g.", fc.DOverR0))
	}
	if !(prior >= 0) {
		return fmt.Errorf("compare: --prior must be ≥ 0, got %g", prior)
	}
	fc.Prior = prior
	if b.Nx < fc.Patch || b.Ny < fc.Patch {
		return fmt.Errorf("compare: the %d×%d field is smaller than one %d px patch (set --patch)", b.Nx, b.Ny, fc.Patch)
	}
	if _, err := optics.NewPupil(fc.Telescope, fc.Patch); err != nil {
		return fmt.Errorf("compare: %w", err)
	}
	return nil
}
