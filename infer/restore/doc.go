// Package restore restores full fields of phase-diversity bursts: it
// calibrates the frames, co-registers the defocused channel to the focused
// one, tiles the field into overlapping apodised patches, obtains every
// frame's wavefront per patch (learned network, optionally polished with a
// few classical iterations, or the full classical fit of package infer),
// deconvolves each patch with the noise-filtered object estimate of model/pd,
// and blends the patches into one seamless field.
//
// Pipeline:
//
//	Prepare      calibration (d − dark)/flat, channel offset (FitOffset),
//	             Fourier shift of the defocused frames (Shifter)
//	Grid         patch origins; separable sin²/cos² blend weights over the
//	             overlaps, normalised by the accumulated weight (Mosaic)
//	Run          one Engine per worker (each with its own solver and plans)
//	             on the per-patch runner it shares with compare
//	             (infer/patchrun: the wavefront by a patchrun.Chain),
//	             results handed to a Sink in increasing patch id, so any
//	             accumulation is independent of scheduling; memory beyond the
//	             field is bounded by the patches in flight; an optional
//	             journal (atomic batch files) lets a killed run resume
//	Shard/Merge  a deterministic contiguous share of the patches per job,
//	             streamed into a partial file; Merge feeds all parts in id
//	             order, so a merged output equals a single run bit for bit
//	Product      FITS (restored field with the input's cards and provenance,
//	             RAWMEAN, PATCHES table), preview PNG, CSV and JSON summary
//
// Job ties these together for the command line (pdwave restore).
package restore
