package compare

import (
	"pdwave/infer"
	"pdwave/model/modes"
	"pdwave/model/net"
)

// NetEstimator is infer.NetEstimator: a trained network run on patches,
// safe for concurrent use.
type NetEstimator = infer.NetEstimator

// NewNetEstimator is infer.NewNetEstimator: it checks that m was made for
// the basis (kind, mode count) and patch size of b and returns an estimator,
// or an error naming both sides of a mismatch.
func NewNetEstimator(m *net.Model, b *modes.Basis) (*NetEstimator, error) {
	return infer.NewNetEstimator(m, b)
}
