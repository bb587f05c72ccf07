package pd

// DefaultSettings returns the one objective of pdwave: the settings the
// classical fit, the polish, the training loss and the scoring all use
// unless a user asks otherwise. Prior weight 0.001, Gamma 1e-3, noise
// filter and tilt constraint on, window taper 0.25 per edge with the
// window-weighted plane removed (Detrend), and the metric evaluated on
// images high-passed with a Gaussian of 1/16 of the patch side
// (HighPass). The values were chosen by
// measurement on bursts over the scene mix (granulation and five real
// photographs) from a simulator that forms images beyond this model; the
// figures are in infer.DefaultConfig's documentation.
func DefaultSettings() Settings {
	return Settings{PriorWeight: 0.001, Gamma: 1e-3, NoiseFilter: true, TiltConstrain: true, Window: 0.25, Detrend: true, HighPass: 1.0 / 16}
}
