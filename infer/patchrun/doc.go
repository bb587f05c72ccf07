// Package patchrun is the per-patch runner restore and compare share, so
// the two verbs judge the same patches the same way: Runner runs per-patch
// work over the patches of a tiling (infer.Grid) on infer.Pool's workers
// and hands each result, in patch order, to a per-patch Done hook
// (restore journals there; compare collects its scores), and Chain makes
// the wavefront estimate of one patch: the learned estimate, an optional
// polish from it and an optional full fit, in that order.
//
// Imports point down: patchrun uses infer only; infer/restore and
// infer/compare use patchrun.
package patchrun
