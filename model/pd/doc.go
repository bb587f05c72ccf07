// Package pd implements the multi-frame phase-diversity metric, its analytic
// gradient with respect to the wavefront coefficients, and the object
// estimate (Gonsalves 1982, Opt. Eng. 21, 829; Paxman, Schulz & Fienup 1992,
// JOSA A 9, 1072; Löfdahl & Scharmer 1994, A&AS 107, 243).
//
// All images of a burst (frames j, channels k) share one object. With
// D_jk = F{w·(d_jk − m_jk)} the apodised data, m_jk the window-weighted mean
// of the image (or, with Settings.Detrend, its window-weighted
// least-squares plane), w the separable window (flat centre, raised-cosine
// taper over Settings.Window of the side per edge), and
// S_jk the OTF of frame j seen through the diversity θ_k of channel k,
//
//	L(α) = Σ_u M(u) [ Σ_jk |D_jk|² − |Σ_jk D_jk* S_jk|² / (γ + Σ_jk |S_jk|²) ]
//	F̂    = Σ_jk D_jk S_jk* / (γ + Σ_jk |S_jk|²)
//
// With Settings.HighPass, d_jk in the metric L is the image minus its
// normalised Gaussian blur (1 − G is shift invariant, so the high-passed
// images are images of the high-passed object and the model holds for
// them), while F̂ for Restore is formed from the unfiltered images: the
// high-pass removes the scene's large-scale structure, whose leakage
// through the window (w·(o⊗s) ≠ (w·o)⊗s at the taper) is otherwise the
// largest model error on smooth or strongly structured scenes.
//
// (the Gonsalves metric with the object eliminated, generalised to many
// frames by Paxman et al. 1992 and Löfdahl & Scharmer 1994). M is the noise mask: frequencies inside the diffraction
// cut-off where the data power clearly exceeds the noise floor measured
// beyond the cut-off. The objective an Objective evaluates (and infer.Fitter minimises) is
//
//	E(α) = L(Pα)/P̄ + w · ½ Σ_jm (Pα)_jm² / σ_m²
//
// with P̄ the masked data power per image, σ_m² the prior (Kolmogorov)
// variance of mode m, w the prior weight (maximum a posteriori phase
// diversity; Blanc, Mugnier & Idier 2003, JOSA A 20, 1035), and P the
// projector that removes the burst mean of the tip/tilt component, which the
// metric cannot see (a tilt common to all frames only shifts the object).
//
// The meaning of the weights. L/P̄ is the part of the data power per image
// that no common object explains: about (images − 1)·|M|·noise/P̄ for an
// exact model, far more on real scenes, where light from outside the patch,
// PSF wings and wavefront beyond the modes are model error. The prior term
// is half the Mahalanobis norm of the wavefront under Kolmogorov statistics
// at the expected D/r0 (tilts loose); w is its weight against the data term.
// A strict MAP weight from white noise alone would be w = 2·noise/P̄ (the
// data term is the noise-weighted residual times noise/P̄, each frequency
// pair counted twice), 1e-5 to 1e-4 on typical bursts; since model error,
// not noise, dominates real patches, w is an empirical weight chosen by
// measurement (infer.DefaultConfig says on what). γ regularises the object
// estimate at frequencies where every OTF is small (relative to the number
// of images, Settings.Gamma).
//
// The gradient follows from the chain rule through S = F{s}, s = |h|²/c and
// h = F⁻¹{P} (Paxman, Schulz & Fienup 1992, in these FFT conventions): with
// G = −M F̂ R*, R = D − F̂ S,
// g = F{G}, W = F{Re(g)·h}, h = F⁻¹{P}, c = Σ|h|²,
//
//	∂L/∂α_m = −4/(c·N²) · Σ_x ψ_m(x) · Im[ P(x) · W*(x) ]
//
// summed over the channels of each frame, for F the unnormalised forward DFT
// and F⁻¹ its inverse with the 1/N² factor (numpy fft2/ifft2 convention, as
// model/fft). c = Σ|h|² = Σ A²/N² does not depend on the phase (Parseval), so
// the PSF normalisation adds no term.
//
// Two images are transformed together wherever the quantity is real: the
// PSFs s_a + i s_b give both OTFs from one complex FFT, and since G is
// Hermitian, F{G_a + i G_b} = g_a + i g_b. Value and gradient thus cost three
// FFTs per image instead of four.
//
// With Settings.FitChannelOffset the parameters also hold a fixed image
// shift (δx, δy) in pixels of each channel k ≥ 1 relative to channel 0,
// common to all frames (camera misregistration). It enters channel k's
// pupil as the phase ramp θ = −2π(δx·x + δy·y)/N (ShiftPhase), which moves
// that channel's model images by +δ in the Fourier sense; its gradient is
// the channel's phase density projected on the ramp, summed over frames.
// The parameter layout is given by NumParams.
//
// SetExactEdges switches the objective to one without the window's model
// error: the object lives on a support larger than the patch and the data
// are the crop of its convolution with each PSF, the object eliminated by
// regularised least squares (variable projection),
//
//	E_x(α) = N²/P̄ · min_o [ Σ_jk ‖C(s_jk ⊗ o) − (d_jk − d̄)‖² + μ‖o‖² ] + prior,
//
// with C the crop to the N×N data and μ a small ridge; see edge.go for the
// solve and the gradient. It costs about four times the periodic metric
// per evaluation and is meant for a refinement after the periodic fit.
//
// An independent numpy implementation (testdata/pdref.py) checks the
// objective, gradient, noise measurement, mask and object estimate.
package pd
