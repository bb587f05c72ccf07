package infer

import (
	"fmt"
)

// ResidualFraction returns the fraction of the true wavefront variance
// left as error, Σ_j Σ_i (fit − truth)² / Σ_j Σ_i truth², over Noll
// j = 2 … jmax (index i = j − 2) and all frames, after removing the burst
// mean of tip and tilt (j = 2, 3) from both, since the metric cannot see a
// tilt common to all frames. fit and truth are frames × Noll-equivalent
// coefficients (rad); modes missing from fit count as zero. By Noll's
// orthonormal normalisation (Noll 1976) the sum of squared coefficients is
// the phase variance over the pupil, so this is a ratio of variances.
// It returns an error if the frame counts differ, truth has fewer than
// jmax−1 modes, or the truth variance is zero.
func ResidualFraction(fit, truth [][]float64, jmax int) (float64, error) {
	if len(fit) != len(truth) || len(truth) == 0 {
		return 0, fmt.Errorf("residual: %d fitted frames vs %d true frames", len(fit), len(truth))
	}
	nm := jmax - 1
	if nm < 1 {
		return 0, fmt.Errorf("residual: jmax %d < 2", jmax)
	}
	for j, row := range truth {
		if len(row) < nm {
			return 0, fmt.Errorf("residual: truth frame %d has %d Noll modes, need %d", j, len(row), nm)
		}
	}
	get := func(c [][]float64, j, i int) float64 {
		if i < len(c[j]) {
			return c[j][i]
		}
		return 0
	}
	nf := float64(len(truth))
	var meanF, meanT [2]float64
	for j := range truth {
		for i := 0; i < 2 && i < nm; i++ {
			meanF[i] += get(fit, j, i) / nf
			meanT[i] += get(truth, j, i) / nf
		}
	}
	var num, den float64
	for j := range truth {
		for i := 0; i < nm; i++ {
			a, t := get(fit, j, i), get(truth, j, i)
			if i < 2 {
				a -= meanF[i]
				t -= meanT[i]
			}
			num += (a - t) * (a - t)
			den += t * t
		}
	}
	if den == 0 {
		return 0, fmt.Errorf("residual: true wavefront has zero variance over Noll 2…%d", jmax)
	}
	return num / den, nil
}
