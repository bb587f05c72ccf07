package infer

import (
	"fmt"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"pdwave/model/net"
	"pdwave/weights"
)

// TestTurnStudy, run only with PDWAVE_TURN_STUDY=N: N bursts per scene set
// (mix, granulation) of the demo site, D/r0 in [3, 7], scored for the
// learned estimate of the burst as recorded, the mean of the learned
// estimates of its eight turns (turned back), and the fit; with the spread
// of the eight turned-back estimates (prior-whitened mean square about
// their mean), and 10- and 20-step polishes of the periodic metric (with
// POLISHX=1: one periodic step, then 9 or 19 on the exact-edge
// objective). One CSV line per burst.
func TestTurnStudy(t *testing.T) {
	n, _ := strconv.Atoi(os.Getenv("PDWAVE_TURN_STUDY"))
	if n <= 0 {
		t.Skip("set PDWAVE_TURN_STUDY=N")
	}
	model, err := weights.Default()
	if w := os.Getenv("WEIGHTS"); w != "" {
		model, err = net.Load(w)
	}
	if err != nil {
		t.Fatal(err)
	}
	cfg, full, est, scenes := learnedStudySetup(t, model)
	for _, k := range []int{10, 20} {
		pc := cfg
		pc.Stop, pc.ExactEdges = Stop{Iterations: k}, 0
		if os.Getenv("POLISHX") != "" { // the polish on the exact-edge objective
			pc.Stop, pc.ExactEdges = Stop{Iterations: 1}, k-1
		}
		pc.Chi2Limit = 0
		f, err := NewFitter(pc)
		if err != nil {
			t.Fatal(err)
		}
		turnPolish = append(turnPolish, f)
	}
	tb, err := NewTurnBack(full.Basis())
	if err != nil {
		t.Fatal(err)
	}
	seed, _ := strconv.ParseUint(os.Getenv("SEED"), 10, 64)
	fmt.Println("TURN scene,dr0,err_learned,err_turned4,err_turned8,err_fit,spread,obj_learned,obj_turned8,obj_fit,p10_learned,p10_turned8,p20_learned,p20_turned8")
	for si, sc := range scenes {
		for b := 0; b < n; b++ {
			rng := rand.New(rand.NewPCG(2000+seed, uint64(si)<<20|uint64(b)))
			c := StudyCase{DOverR0: 3 + 4*rng.Float64(), Patch: 64, Frames: 16, DiversityPV: 1}
			data, truth, err := sc.Source(c, rng)
			if err != nil {
				t.Fatal(err)
			}
			line, err := turnStudyBurst(data, truth, est, tb, full)
			if err != nil {
				t.Fatal(err)
			}
			fmt.Printf("TURN %s,%.3f,%s\n", sc.Name, c.DOverR0, line)
		}
	}
}

// turnPolish are the 10- and 20-step polishers of TestTurnStudy.
var turnPolish []*Fitter

func turnStudyBurst(data [][][]float64, truth [][]float64, est *NetEstimator, tb *TurnBack, full *Fitter) (string, error) {
	b := full.Basis()
	frames, m, n := len(data[0]), b.Count, b.N
	var each [Turns][][]float64
	turned := [][][]float64{make([][]float64, frames), make([][]float64, frames)}
	for tr := 0; tr < Turns; tr++ {
		for c := range turned {
			for j := range turned[c] {
				turned[c][j] = make([]float64, n*n)
				TurnImage(turned[c][j], data[c][j], n, tr)
			}
		}
		cl, err := est.Estimate(turned)
		if err != nil {
			return "", err
		}
		each[tr] = make([][]float64, frames)
		for j := range cl {
			each[tr][j] = make([]float64, m)
			tb.Back(each[tr][j], cl[j], tr)
		}
	}
	mean := func(k int) [][]float64 {
		out := make([][]float64, frames)
		for j := range out {
			out[j] = make([]float64, m)
			for tr := 0; tr < k; tr++ {
				for i := range out[j] {
					out[j][i] += each[tr][j][i] / float64(k)
				}
			}
		}
		return out
	}
	m4, m8 := mean(4), mean(8)
	var spread float64
	for tr := 0; tr < Turns; tr++ {
		for j := range m8 {
			for i := range m8[j] {
				d := each[tr][j][i] - m8[j][i]
				spread += d * d / full.PriorVariance()[i]
			}
		}
	}
	spread /= float64(Turns * frames * m)
	r, err := full.Fit(data, nil)
	if err != nil {
		return "", err
	}
	score := func(c [][]float64) float64 {
		nl := make([][]float64, frames)
		for j := range c {
			nl[j] = make([]float64, m)
			b.NollEquivalent(nl[j], c[j])
		}
		e, _ := ResidualFraction(nl, truth, 21)
		return e
	}
	eo := func(c [][]float64) float64 {
		e, _, _ := full.Objective(data, c)
		return e
	}
	line := fmt.Sprintf("%.4f,%.4f,%.4f,%.4f,%.4g,%.5g,%.5g,%.5g", score(each[0]), score(m4), score(m8), score(r.Coeffs), spread,
		eo(each[0]), eo(m8), r.MetricEnd)
	for _, pf := range turnPolish {
		for _, start := range [][][]float64{each[0], m8} {
			pr, err := pf.Fit(data, start)
			if err != nil {
				return "", err
			}
			e, _ := ResidualFraction(pr.Noll, truth, 21)
			line += fmt.Sprintf(",%.4f", e)
		}
	}
	return line, nil
}
