// Package instrument is the one description of the instrument shared by
// every verb: telescope, channels with their diversity, patch, modes, basis
// and seeing prior. Each source of settings (command-line flags, a burst
// header, weights metadata, a site file) says what it knows as a Partial,
// whose fields may be explicitly unset; Resolve combines Partials with one
// documented precedence into an Instrument and notes where each value came
// from; Build turns an Instrument into the pupil, basis, per-channel
// diversity, prior variances and output scale.
package instrument
