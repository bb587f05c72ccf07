package compare

import "testing"

// BenchmarkRunDemoPatch times the whole comparison of one demo-size patch
// (64 px, 16 frames, 36 KL modes, D/r0 = 5): a stand-in learned estimate,
// a 5-iteration polish, a fit of at most 200 iterations from the polished
// coefficients, metrics, restorations, spectra and the example.
func BenchmarkRunDemoPatch(b *testing.B) {
	cfg := testConfig(64, 16, 36)
	cfg.Fit.DOverR0 = 5
	cfg.Fit.Stop.Iterations = 200
	cfg.Fit.Stop.RelChange = 1e-6
	cfg.Polish = 5
	cfg.Workers = 1
	bu, truth := synthBurst(b, cfg, 64, 64, 11, 1e-3)
	est := newTruthEstimator(b, cfg, truth, 0.5, 12)
	b.ResetTimer()
	for range b.N {
		r, err := Run(bu, cfg, est)
		if err != nil {
			b.Fatal(err)
		}
		p := &r.Patches[0]
		b.ReportMetric(float64(p.Find(Fitted).Iterations), "fit-iter")
		b.ReportMetric(p.Find(Polished).Seconds*1e3, "polish-ms")
		b.ReportMetric(p.Find(Fitted).Seconds*1e3, "fit-ms")
	}
}

// BenchmarkOutputs times rendering every output (CSV, JSON, six figures,
// the HTML page) of a small synthetic report.
func BenchmarkOutputs(b *testing.B) {
	r := synthReport(1)
	for range b.N {
		if _, err := Outputs(r); err != nil {
			b.Fatal(err)
		}
	}
}
