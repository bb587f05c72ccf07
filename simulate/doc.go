// Package simulate generates synthetic phase-diversity bursts of solar
// scenes seen through a turbulent atmosphere.
//
// The pieces, from the bottom up:
//
//   - Phase screens (ScreenParams, ScreenGenerator, Screen): random phase
//     maps in radians with the von Kármán phase power spectrum
//     Φ(κ) = 0.023 r0^(−5/3) (κ² + κ0²)^(−11/6), κ in cycles per metre and
//     κ0 = 1/L0, drawn by the FFT method of Lane, Glindemann & Dainty (1992)
//     with optional subharmonics for the low orders (Johansson & Gavel 1994).
//   - Layers (Layer, Turbulence, Atmosphere): several screens at different
//     heights that move with the wind between frames (frozen flow) and are
//     seen shifted by h·ϑ from field angle ϑ (anisoplanatism).
//   - Scenes (Granulation, ReadObject): solar-like granulation or a
//     user-supplied object map.
//   - Image formation and camera (Camera): PSFs of the telescope pupil with
//     the frame's wavefront plus the channel's diversity, convolution on a
//     canvas larger than the output (no periodic edges), photon noise, read
//     noise and quantisation.
//   - Bursts (Config, Options, Patch, Field): single-patch bursts with the
//     true wavefront coefficients, and full-field bursts with a smoothly
//     varying PSF, both with the true object.
//
// Conventions follow the rest of pdwave: SI units (m, rad, s), images
// row-major with x fastest (index y*nx+x), the pupil grid N×N with its centre
// at pixel (N/2, N/2). Every random draw comes from the *rand.Rand passed
// in, in a fixed order, so results are deterministic given its seed, also
// when work runs on several goroutines.
package simulate
