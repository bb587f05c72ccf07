package main

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"pdwave/model/burst"
	"pdwave/model/fits"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/site"
	"pdwave/simulate"
)

// simulateFlags are the flags of "pdwave simulate".
type simulateFlags struct {
	site     string
	out      string
	bursts   int
	seed     uint64
	field    int
	frames   int
	screens  bool
	object   string
	scene    string
	contrast float64
	workers  int
}

// simulateOpts holds the flags of "pdwave simulate".
var simulateOpts simulateFlags

var simulateCmd = &cobra.Command{
	Use:   "simulate --site FILE --out DIR",
	Short: "Simulate phase-diversity bursts with known wavefronts",
	Long: `simulate writes synthetic phase-diversity bursts for the telescope, seeing
and camera of a site file: DIR/burst-0001.fits, DIR/burst-0002.fits, ...

Each burst is seen through the site's turbulent layers (von Kármán phase
screens moving with the wind between frames), imaged through the telescope
pupil in focus (channel 1) and with the site's defocus diversity (channel 2),
with photon noise, read noise and quantisation to the camera's bit depth.
The scene (--scene) is synthetic granulation (the default), real images
("real": the photographs shipped in testdata/scenes, found from the working
directory upwards or at $PDWAVE_SCENES; or FITS files and folders given by
path, comma-separated), or "mix" (granulation or a shipped real image, half
each). Real images are used at the camera's pixel scale, as random windows
in one of eight orientations (quarter turns and flips), mirror-tiled when
the canvas is larger than the image. Every scene's rms contrast at the
diffraction limit is set to --contrast. With --object a user object map (a
FITS image at the camera's pixel scale) is used as it is instead. The scene
each burst was drawn from is recorded as SIMSCENE in the header.

Without --field each burst is one patch of the site's patch size; its file
carries the true wavefront of every frame (extension TRUTH: coefficients in
the site's basis and as Noll Zernike coefficients) and the true object
(extension OBJECT). With --field NX each burst is an NX×NX field whose PSF
varies over the field (anisoplanatism); it carries OBJECT only.

r0 is drawn for every burst from the site's seeing distribution; it is
recorded as SIMR0 (m, at the observing wavelength) in the header, with the
seed and all settings as HISTORY cards. Burst i (from 1) uses the random
stream (--seed, i), so any burst can be remade alone.

With --screens, DIR/burst-0001-screens.fits holds the layer phase screens
(radians at the observing wavelength; one image per layer, LAYER1, ...,
keywords SCRPIX = pixel size in m, LAYERH = height in m, LAYERR0 = the
layer's r0 in m) and, for patches, extension PHASE: the wavefront of every
frame on the pupil grid (radians, N×N×frames, pixel SCRPIX m).`,
	Args: cobra.NoArgs,
	RunE: simulateRun,
}

// simulateScreenOpts holds the flags of "pdwave simulate screen".
var simulateScreenOpts struct {
	site  string
	out   string
	size  int
	seed  uint64
	r0    float64
	pixel float64
	noSub bool
}

var simulateScreenCmd = &cobra.Command{
	Use:   "screen --site FILE --out FILE.fits --size N",
	Short: "Write one von Kármán phase screen",
	Long: `screen writes one N×N phase screen in radians at the site's observing
wavelength, drawn with the FFT method and subharmonics, with the site's r0
(median, or --r0) and outer scale.

The pixel size is the site's pupil-grid pixel (D divided by the pupil
diameter in pixels on the patch grid) unless --pixel is given. Header
keywords: SCRPIX (pixel size, m), SCRR0 (r0, m), SCRL0 (outer scale, m;
0 = Kolmogorov), SCRLEV (subharmonic levels), BUNIT = 'rad'.`,
	Args: cobra.NoArgs,
	RunE: simulateScreenRun,
}

func init() {
	f := simulateCmd.Flags()
	f.StringVar(&simulateOpts.site, "site", "", "site/telescope YAML file (required)")
	f.StringVar(&simulateOpts.out, "out", "", "output folder, created if missing (required)")
	f.IntVar(&simulateOpts.bursts, "bursts", 1, "number of bursts")
	f.Uint64Var(&simulateOpts.seed, "seed", 1, "random seed")
	f.IntVar(&simulateOpts.field, "field", 0, "simulate NX×NX full fields instead of single patches (0 = patches)")
	f.IntVar(&simulateOpts.frames, "frames", 0, "frames per burst (0 = the site's)")
	f.BoolVar(&simulateOpts.screens, "screens", false, "also write the phase screens of every burst")
	f.StringVar(&simulateOpts.object, "object", "", "FITS object map to image as it is, instead of a drawn scene")
	f.StringVar(&simulateOpts.scene, "scene", "granulation", "granulation, real, mix, or FITS files/folders (comma-separated)")
	f.Float64Var(&simulateOpts.contrast, "contrast", 0.12, "rms contrast of the scene at the diffraction limit")
	f.IntVar(&simulateOpts.workers, "workers", 0, "worker goroutines (0 = all cores)")

	g := simulateScreenCmd.Flags()
	g.StringVar(&simulateScreenOpts.site, "site", "", "site/telescope YAML file (required)")
	g.StringVar(&simulateScreenOpts.out, "out", "", "output FITS file (required)")
	g.IntVar(&simulateScreenOpts.size, "size", 256, "screen side, pixels")
	g.Uint64Var(&simulateScreenOpts.seed, "seed", 1, "random seed")
	g.Float64Var(&simulateScreenOpts.r0, "r0", 0, "r0 at the observing wavelength, m (0 = the site's median)")
	g.Float64Var(&simulateScreenOpts.pixel, "pixel", 0, "pixel size, m (0 = the site's pupil-grid pixel)")
	g.BoolVar(&simulateScreenOpts.noSub, "no-subharmonics", false, "draw without subharmonics")

	simulateCmd.AddCommand(simulateScreenCmd)
	root.AddCommand(simulateCmd)
}

func simulateRun(cmd *cobra.Command, _ []string) error {
	o := simulateOpts
	if err := o.check(cmd); err != nil {
		return err
	}
	st, cfg, notes, err := o.config()
	if err != nil {
		return err
	}
	sim, err := simulate.New(cfg)
	if err != nil {
		return fmt.Errorf("simulate: site %s: %w", o.site, err)
	}
	opts, err := o.options()
	if err != nil {
		return err
	}
	if err := os.MkdirAll(o.out, 0o755); err != nil {
		return fmt.Errorf("simulate: creating %s: %w", o.out, err)
	}
	for i := 1; i <= o.bursts; i++ {
		rng := rand.New(rand.NewPCG(o.seed, uint64(i)))
		opts.R0 = st.DrawR0(rng)
		msg, err := o.burst(sim, notes, i, rng, opts, st.CameraGeometry())
		if err != nil {
			return err
		}
		fmt.Fprintln(cmd.OutOrStdout(), msg)
	}
	return nil
}

// check rejects missing or out-of-range flags.
func (o simulateFlags) check(cmd *cobra.Command) error {
	switch {
	case o.site == "":
		return errors.New("simulate: --site is required")
	case o.out == "":
		return errors.New("simulate: --out is required")
	case o.bursts < 1 || o.bursts > 1000000:
		return fmt.Errorf("simulate: --bursts %d, want 1 to 1000000", o.bursts)
	case o.frames < 0:
		return fmt.Errorf("simulate: --frames %d, want ≥ 1 (0 = the site's)", o.frames)
	case o.field < 0 || o.field > simulate.MaxField:
		return fmt.Errorf("simulate: --field %d, want 0 (patches) or a side up to %d", o.field, simulate.MaxField)
	case !(o.contrast > 0 && o.contrast < 1):
		return fmt.Errorf("simulate: --contrast %g, want in (0, 1)", o.contrast)
	case o.workers < 0 || o.workers > maxWorkers():
		return checkWorkers("simulate", o.workers)
	case o.object != "" && cmd.Flags().Changed("scene"):
		return errors.New("simulate: --object and --scene exclude each other")
	}
	return checkDir("simulate", o.out, append(sceneInputs(o.scene), o.site, o.object)...)
}

// config loads the site and returns it with the simulator configuration
// (simulate.ConfigFromSite, --frames applied) and the notes of where each
// instrument value came from.
func (o simulateFlags) config() (*site.Site, simulate.Config, instrument.Notes, error) {
	st, err := site.Load(o.site)
	if err != nil {
		return nil, simulate.Config{}, nil, err
	}
	cfg, notes, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		return nil, cfg, nil, fmt.Errorf("simulate: site %s: %w", o.site, err)
	}
	if o.frames > 0 {
		cfg.Frames = o.frames
	}
	if o.field > 0 && o.field < cfg.Patch {
		return nil, cfg, nil, fmt.Errorf("simulate: --field %d is smaller than the patch (%d px)", o.field, cfg.Patch)
	}
	return st, cfg, notes, nil
}

// options returns the simulation options of the flags: workers, phases
// kept for --screens, the scene (--scene) or the object map (--object) and
// the contrast.
func (o simulateFlags) options() (simulate.Options, error) {
	source, err := sceneSource(o.scene, simulate.GranulationParams{Contrast: o.contrast})
	if err != nil {
		return simulate.Options{}, err
	}
	opts := simulate.Options{Workers: o.workers, KeepPhases: o.screens, Source: source}
	opts.Scene.Contrast = o.contrast
	if o.object != "" {
		data, nx, ny, err := simulate.ReadObject(o.object)
		if err != nil {
			return opts, err
		}
		opts.Object, opts.ObjectNx, opts.ObjectNy = data, nx, ny
	}
	return opts, nil
}

// burst simulates burst i from rng with opts, writes it (and with
// --screens its screens) and returns the line to print. The simulated
// channels are in the common orientation of the site's camera geometry
// geom: a geometry that is not the identity is recorded as the card PDGEOM,
// so a reader given the same site does not turn them again.
func (o simulateFlags) burst(sim *simulate.Simulator, notes instrument.Notes, i int, rng *rand.Rand, opts simulate.Options, geom burst.Geometry) (string, error) {
	kind := "patch"
	var res *simulate.Result
	var err error
	if o.field > 0 {
		kind = "field"
		res, err = sim.Field(rng, o.field, o.field, opts)
	} else {
		res, err = sim.Patch(rng, opts)
	}
	if err != nil {
		return "", fmt.Errorf("simulate: burst %d: %w", i, err)
	}
	b, cfg := res.Burst, sim.Config()
	prov := simulateHeader(o, cfg, notes, kind, i, res)
	if !geom.Identity() {
		b.Cards = append(b.Cards, fits.Card{Key: burst.GeometryKey, Value: geom.String(), Comment: "simulated in the common orientation"})
	}
	name := filepath.Join(o.out, fmt.Sprintf("burst-%04d.fits", i))
	if err := burst.Write(name, b, prov); err != nil {
		return "", err
	}
	msg := fmt.Sprintf("wrote %s (%s %d×%d, %d frames, r0 = %.3f m, D/r0 = %.1f)", name, kind, b.Nx, b.Ny, b.Frames, res.R0, cfg.Telescope.Diameter/res.R0)
	if o.screens {
		sname := filepath.Join(o.out, fmt.Sprintf("burst-%04d-screens.fits", i))
		if err := fits.WriteFile(sname, res.ScreenHDUs(sim, prov)...); err != nil {
			return "", err
		}
		msg += " and " + sname
	}
	return msg, nil
}

// simulateHeader adds the simulation cards (SIMR0, SIMSEED, SIMBURST,
// SIMSCENE) to burst i of res and returns its provenance cards (as
// HISTORY: the instrument's settings, instrument.Instrument.Settings, with
// "sources" saying where each came from, and the simulation's own; the
// site file is "site_file", and "basis_for" the clear aperture of the
// truth's basis).
func simulateHeader(o simulateFlags, cfg simulate.Config, notes instrument.Notes, kind string, i int, res *simulate.Result) []fits.Card {
	b := res.Burst
	b.Cards = append(b.Cards,
		fits.Card{Key: "SIMR0", Value: res.R0, Comment: "simulated r0 at WAVELNTH, m"},
		fits.Card{Key: "SIMSEED", Value: strconv.FormatUint(o.seed, 10), Comment: "simulation seed; burst stream SIMBURST"},
		fits.Card{Key: "SIMBURST", Value: i, Comment: "burst number (random stream)"},
		fits.Card{Key: "SIMSCENE", Value: res.Scene, Comment: "what the object was drawn from"},
	)
	settings := cfg.Settings()
	for k, v := range map[string]string{
		"verb":         "simulate",
		"sources":      notes.String(),
		"site_file":    o.site,
		"seed":         strconv.FormatUint(o.seed, 10),
		"burst":        strconv.Itoa(i),
		"kind":         kind,
		"r0_m":         strconv.FormatFloat(res.R0, 'g', 6, 64),
		"frames":       strconv.Itoa(cfg.Frames),
		"size":         fmt.Sprintf("%dx%d", b.Nx, b.Ny),
		"subharmonics": "true",
		"contrast":     strconv.FormatFloat(o.contrast, 'g', 6, 64),
		"scene":        o.scene,
		"scene_drawn":  res.Scene,
	} {
		settings[k] = v
	}
	// The truth is in the clear-aperture basis (simulate.Simulator.Truth).
	settings["basis_for"] = instrument.ApertureText(modes.Aperture{})
	if o.object != "" {
		settings["object"] = o.object
		delete(settings, "contrast")
		delete(settings, "scene")
	}
	return fits.Provenance(version, settings)
}

// sceneSource returns the scene of --scene: nil (the simulator's built-in
// granulation) for "granulation", the shipped real images for "real",
// SceneMix of granulation with g and those images for "mix", else the
// images of the comma-separated FITS files and folders.
func sceneSource(spec string, g simulate.GranulationParams) (simulate.Scene, error) {
	switch spec {
	case "granulation":
		return nil, nil
	case "real", "mix":
		dir, err := simulate.FindSceneDir()
		if err != nil {
			return nil, fmt.Errorf("simulate: --scene %s: %w", spec, err)
		}
		imgs, err := simulate.LoadSceneDir(dir)
		if err != nil {
			return nil, fmt.Errorf("simulate: --scene %s: %w", spec, err)
		}
		if spec == "real" {
			return imgs, nil
		}
		return simulate.SceneMix(g, imgs), nil
	}
	all := &simulate.ImageScene{}
	for _, p := range strings.Split(spec, ",") {
		p = strings.TrimSpace(p)
		st, err := os.Stat(p)
		if p == "" || err != nil {
			return nil, fmt.Errorf("simulate: --scene %q: %q is not granulation, real, mix, or a FITS file or folder", spec, p)
		}
		var imgs *simulate.ImageScene
		if st.IsDir() {
			imgs, err = simulate.LoadSceneDir(p)
		} else {
			imgs, err = simulate.NewImageScene(p)
		}
		if err != nil {
			return nil, fmt.Errorf("simulate: --scene: %w", err)
		}
		all.Images = append(all.Images, imgs.Images...)
	}
	return all, nil
}

func simulateScreenRun(cmd *cobra.Command, _ []string) error {
	o := simulateScreenOpts
	switch {
	case o.site == "":
		return errors.New("simulate screen: --site is required")
	case o.out == "":
		return errors.New("simulate screen: --out is required")
	case o.size < 8 || o.size > simulate.MaxScreen:
		return fmt.Errorf("simulate screen: --size %d, want 8 to %d", o.size, simulate.MaxScreen)
	case !(o.r0 >= 0) || math.IsInf(o.r0, 0):
		return fmt.Errorf("simulate screen: --r0 %g, want a positive value in m (0 = the site's)", o.r0)
	case !(o.pixel >= 0) || math.IsInf(o.pixel, 0):
		return fmt.Errorf("simulate screen: --pixel %g, want a positive value in m (0 = the pupil-grid pixel)", o.pixel)
	}
	if err := checkFiles("simulate screen", []string{o.out}, o.site); err != nil {
		return err
	}
	st, err := site.Load(o.site)
	if err != nil {
		return err
	}
	cfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		return fmt.Errorf("simulate screen: site %s: %w", o.site, err)
	}
	p, err := simulate.ScreenParamsFor(cfg, o.size, o.pixel, o.r0, !o.noSub)
	if err != nil {
		return fmt.Errorf("simulate screen: site %s: %w", o.site, err)
	}
	s, err := simulate.NewScreen(rand.New(rand.NewPCG(o.seed, 0)), p)
	if err != nil {
		return fmt.Errorf("simulate screen: %w", err)
	}
	prov := fits.Provenance(version, map[string]string{
		"verb": "simulate screen", "site": o.site, "seed": strconv.FormatUint(o.seed, 10),
		"size": strconv.Itoa(o.size),
	})
	if err := fits.WriteFile(o.out, simulate.ScreenImage(s, p, prov)); err != nil {
		return err
	}
	l0 := p.OuterScale()
	fmt.Fprintf(cmd.OutOrStdout(), "wrote %s (%d×%d px of %.4g m, r0 = %.3f m, L0 = %g m, %d subharmonic levels)\n", o.out, p.N, p.N, p.Dx, p.R0, l0, p.Levels)
	return nil
}
