package infer

// FlagLearnedSuspect names the single-patch flag on a learned estimate
// whose wavefront is likely much worse than the classical fit's. Restore
// and compare write it under this name.
const FlagLearnedSuspect = "learned_suspect"

// LearnedSuspectLimit is the threshold of FlagLearnedSuspect on a patch's
// metric over its noise-only expectation at the learned estimate
// (restore's PatchResult.MetricRatio: the object-eliminated metric with
// restore's tile window over (K−1)·ν·M/P̄, Paxman, Schulz & Fienup 1992,
// JOSA A 9, 1072; dimensionless).
//
// Calibrated on the patches of restore's grid (64 px, overlap 16) of
// simulated 192² px fields of the demo site, 16 frames, D/r0 drawn in
// [3, 7], over the scene mix (granulation or a window of a real image),
// truth at each patch centre, errors over Noll 2–21
// (TestFlagFieldStudy in infer/compare). Calibration set (seed 1, 20
// fields, 320 patches): of the 164 patches whose learned error exceeds
// twice the fit's, 34 (21 %) exceed the limit; of the 37 within 1.2× of
// the fit's, 3 (8 %). Fresh set (seed 2, 20 fields, 320 patches): 28 of
// 154 (18 %) and 6 of 70 (9 %). The limit is the lowest that kept the
// calibration set's false-alarm share at or below 10 %; the target
// of 80 % of the bad patches flagged is missed by about 60 points. No
// candidate computable without the full fit did better on the fresh set:
// the objective ratios learned / 2- or 5-step polish and learned / fitted,
// the prior chi² and coefficient rms of the learned estimate and the
// restored-to-raw contrast were each at or below 20 % at ≤ 10 % false
// alarms, and linear combinations chosen on the calibration set broke the
// false-alarm bound on the fresh one (17–27 %). The learned error is
// above twice the fit's mostly where the fit is good (granulation, grass:
// fit error ≈ 0.1 of the true variance), and within 1.2× mostly where the
// fit itself is poor (brick, camera), so the flag says "a fit would help
// here" rather than "the network failed". The calibration used single
// predictions; the default turned estimate (DefaultTurns) fits the data
// better (restore's median metric over noise on a demo field 13.5 → 12.8),
// so the same limit flags somewhat fewer patches.
const LearnedSuspectLimit = 15.2

// LearnedSuspect reports whether a learned estimate with metric over its
// noise-only expectation metricOverNoise (see LearnedSuspectLimit) is
// flagged. NaN (unknown) is not flagged.
func LearnedSuspect(metricOverNoise float64) bool {
	return metricOverNoise > LearnedSuspectLimit
}
