// Package train fits pdwave's wavefront network (model/net) on a CPU.
//
// The loss is unsupervised: for every burst, the phase-diversity objective
// of model/pd (metric normalised by the data power plus the Kolmogorov
// prior) evaluated at the coefficients the network predicts. Its gradient
// with respect to the coefficients is back-propagated through the network
// (net.Graph), so training needs no ground truth and runs on simulated
// bursts or straight on observations. An optional supervised warm start on
// simulated truth may come first. Optimiser: Adam (Kingma & Ba 2015,
// Algorithm 1) with a linear warm-up and cosine decay of the step size.
// Runs are deterministic given the seed and resume exactly from checkpoints.
package train

import (
	"encoding/json"
	"fmt"

	"gonum.org/v1/gonum/mat"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/optics"
	"pdwave/model/pd"
)

// Setup is what training needs to know about the instrument and the data.
type Setup struct {
	// Instrument is the optics, the two channels' diversity, the patch
	// side N, the modes estimated and their basis, and the expected D/r0,
	// which sets the prior and the network's output scale. Its Site is the
	// name recorded in the weights.
	instrument.Instrument
	Frames int // frames per burst
}

// Validate reports whether s is usable: a valid instrument
// (instrument.Instrument.Validate) with two channels of different defocus
// and at least one frame per burst.
func (s Setup) Validate() error {
	if err := s.Instrument.Validate(); err != nil {
		return fmt.Errorf("train: %w", err)
	}
	if s.Channels() != 2 {
		return fmt.Errorf("train: %d channels; training reads two", s.Channels())
	}
	if err := s.NeedDiversity(); err != nil {
		return fmt.Errorf("train: %w", err)
	}
	if s.Frames < 1 {
		return fmt.Errorf("train: %d frames per burst", s.Frames)
	}
	return nil
}

// Meta returns the weight-file metadata for s (net.MetaFor).
func (s Setup) Meta() net.Meta { return net.MetaFor(s.Instrument, s.Frames) }

// upgradeSetup returns s, decoded from the JSON checkpoint state data,
// with the channels' diversity and D/r0 filled from the fields that
// checkpoints written before Setup embedded instrument.Instrument held
// instead ("DiversityPV", waves PV of channel 1; "R0", the median r0 at λ,
// m, so D/r0 = D/R0). A setup that has both is returned as it is.
func upgradeSetup(s Setup, data []byte) (Setup, error) {
	if s.Diversity != nil && s.DOverR0 != 0 {
		return s, nil
	}
	var old struct {
		Setup struct{ DiversityPV, R0 float64 }
	}
	if err := json.Unmarshal(data, &old); err != nil {
		return s, err
	}
	if s.Diversity == nil && old.Setup.DiversityPV != 0 {
		s.Diversity = []float64{0, old.Setup.DiversityPV}
	}
	if s.DOverR0 == 0 && old.Setup.R0 > 0 {
		s.DOverR0 = s.Telescope.Diameter / old.Setup.R0
	}
	return s, nil
}

// problem bundles the pieces of the metric shared by all workers; read-only.
type problem struct {
	setup     Setup
	pupil     *optics.Pupil
	basis     *modes.Basis
	diversity [][]float64 // per channel: nil (focused), defocus map
	prior     []float64   // σ_m², rad² (tilts +Inf)
	scale     []float64   // output scale σ_m, rad (tilts included)
	fromNoll  *mat.Dense  // native = fromNoll · noll(j = 2..Modes+1)
	settings  pd.Settings
}

// newProblem builds the metric's pieces for s with instrument.Build in the
// clear-aperture basis, the basis of the network's outputs (the learned
// estimator converts them exactly; modes.New).
func newProblem(s Setup, priorWeight, gamma float64) (*problem, error) {
	if err := s.Validate(); err != nil {
		return nil, err
	}
	bt, err := instrument.Build(s.Instrument, instrument.ClearAperture)
	if err != nil {
		return nil, fmt.Errorf("train: %w", err)
	}
	p := &problem{
		setup: s, pupil: bt.Pupil, basis: bt.Basis, diversity: bt.Diversity,
		prior:    pd.KolmogorovPrior(bt.Basis, s.DOverR0),
		scale:    bt.Scale,
		settings: pd.DefaultSettings(),
	}
	p.settings.PriorWeight, p.settings.Gamma = priorWeight, gamma // the fit's objective, with the run's weights
	p.settings.HighPassSeeing = s.DOverR0
	if bt.Basis.ToNoll != nil {
		var inv mat.Dense
		if err := inv.Inverse(bt.Basis.ToNoll); err != nil {
			return nil, fmt.Errorf("train: basis to Noll matrix not invertible: %w", err)
		}
		p.fromNoll = &inv
	}
	return p, nil
}

// newSolver returns a metric solver for one worker.
func (p *problem) newSolver() *pd.Objective {
	s := pd.NewObjective(p.pupil, p.basis, p.diversity, p.setup.Frames, p.settings)
	s.SetPrior(p.prior)
	return s
}

// nativeFromNoll sets dst (Modes) to the native coefficients whose Noll
// equivalent is noll[0:Modes] (j = 2..Modes+1).
func (p *problem) nativeFromNoll(dst, noll []float64) {
	if p.fromNoll == nil {
		copy(dst, noll[:len(dst)])
		return
	}
	for i := range dst {
		s := 0.0
		for k := range dst {
			s += p.fromNoll.At(i, k) * noll[k]
		}
		dst[i] = s
	}
}
