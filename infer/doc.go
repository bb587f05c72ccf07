// Package infer fits wavefront coefficients to phase-diversity patches with
// the classical optimiser, restores the patch images, and defines the
// Estimator interface through which the classical fit and a learned network
// are interchangeable.
//
// A patch is data[channel][frame], each an N×N row-major image; channel 0
// is the focused channel. Coefficients are frames × modes (native basis,
// rad of phase at the observing wavelength) and come with their
// Noll-equivalent (Noll j = 2, 3, …).
//
// # The fit
//
// Fitter minimises the objective of model/pd (multi-frame phase-diversity
// metric normalised by the data power, plus a weak Kolmogorov prior, burst
// mean of tip/tilt pinned) with gonum's L-BFGS, in variables scaled by the
// Kolmogorov standard deviation of each mode (a diagonal preconditioner).
// Fits from zero start with each frame's tip/tilt measured by
// cross-correlating the frames of the focused channel: image motion of
// several pixels over a ~10 px granulation pattern otherwise traps the
// optimiser in a neighbouring correlation peak (measured on modal synthetic
// bursts, prior 0.1: 2 of 6 bursts stuck at 36–39 % error without it, all
// at 2–8 % with it).
//
// # Accuracy study
//
// Measured with "pdwave fit study --site testdata/demo-site.yaml --bursts 6"
// (the simulator: von Kármán screens, L0 = 30 m, three frozen-flow layers,
// granulation, 10⁴ photons per pixel, read noise; demo telescope D = 0.5 m,
// λ = 600 nm, 0.120″ pixels; 36 KL modes, defaults of DefaultConfig). Error
// is the fraction of the true wavefront variance left as error, burst-mean
// tilt removed, mean ± standard deviation over 6 bursts:
//
//	D/r0  patch frames  div.   err 2–10       err 2–21
//	 5     64    16     1.0   0.023 ± 0.013  0.036 ± 0.015   reference
//	 2     64    16     1.0   0.026 ± 0.012  0.046 ± 0.019
//	 3     64    16     1.0   0.021 ± 0.006  0.034 ± 0.010
//	 7     64    16     1.0   0.13  ± 0.08   0.17  ± 0.11
//	10     64    16     1.0   0.41  ± 0.09   0.51  ± 0.10
//	 5     48    16     1.0   0.048 ± 0.014  0.073 ± 0.018
//	 5     96    16     1.0   0.022 ± 0.008  0.036 ± 0.014
//	 5    128    16     1.0   0.031 ± 0.030  0.046 ± 0.034
//	 5     64     4     1.0   0.057 ± 0.030  0.082 ± 0.041
//	 5     64     8     1.0   0.080 ± 0.087  0.11  ± 0.11
//	 5     64    32     1.0   0.043 ± 0.028  0.059 ± 0.034
//	 5     64    16     0.5   0.099 ± 0.036  0.13  ± 0.04
//	 5     64    16     1.5   0.056 ± 0.059  0.069 ± 0.061
//	 5     64    16     2.0   0.067 ± 0.047  0.084 ± 0.052
//
// The envelope: D/r0 ≤ 7 at 64 px; 64–96 px patches; one wave of defocus.
// At D/r0 = 10 the fit is limited by the model, not the optimiser: started
// at the truth it still drifts to 12 % (2–10) and from zero it ends near
// 40 % at a lower objective than the truth's neighbourhood, with 800
// iterations as with 200; larger patches (96 px: 33 %) help a little.
// With 32 frames the 200-iteration limit stops the fit before convergence.
//
// Prior weight (reference case, 6 bursts): 0 → 0.043/0.066 (2–10/2–21),
// 0.001 → 0.043/0.065, 0.003 → 0.051/0.074, 0.01 → 0.084/0.11,
// 0.1 → 0.32/0.35. With the window-weighted mean subtraction of model/pd the
// bare metric is already well behaved on these bursts; the prior only helps
// at D/r0 = 10 on modal synthetic bursts (0.16 → 0.13 at weight 0.01), so
// the default is a weak 0.001.
//
// One full fit of the reference case (64 px, 16 frames × 2 channels, 36
// modes, 200 L-BFGS iterations) costs 0.58 s of CPU (BenchmarkFit).
package infer
