package main

import (
	"fmt"
	"os"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/infer/restore"
	"pdwave/internal/progress"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/weights"
)

// restoreFlags holds the flags of "pdwave restore".
var restoreFlags struct {
	out, site, weights, shard          string
	offset                             string
	dark, flat, bad                    []string
	patch, overlap, polish, workers    int
	turns                              int
	fit, resume, pairs, noAlign, quiet bool
}

var restoreCmd = &cobra.Command{
	Use:   "restore BURST... --out FILE",
	Short: "Restore full fields: calibrate, tile, estimate wavefronts, deconvolve, mosaic",
	Long: `restore turns phase-diversity bursts of a whole field into sharp images.

Each burst (a 4-D FITS cube; with --pairs, a focused and a defocused 3-D file
after each other) is calibrated as it is read, each camera with its own
frames ((frame − dark)/flat, the flat normalised to mean 1; --dark, --flat,
--bad take one file for both cameras or two, camera 1's first; bad pixels,
given or found as hot in the dark and dead in the flat, and undefined pixels
are filled from their good neighbours and counted), turned into one
orientation by the site file's camera geometry, the defocused channel is co-registered to the focused one (the
sub-pixel offset, measured by cross-correlating the burst means or given with
--offset, is reported and removed), and the field is cut into
overlapping patches (--patch, --overlap; defaults from the site file and
patch/4). In every patch the wavefront of each frame comes from the learned
network (default when weights are available), optionally polished with
--polish classical iterations, or from the full classical fit (--fit); the
patch is deconvolved with the noise-filtered object estimate, and the patches
are blended into one seamless field with weights that sum to one across the
overlaps.

Output: FILE (FITS: the restored field with the input's WCS and header cards
and the provenance; extensions RAWMEAN, the calibrated burst mean, and
PATCHES, a table with every patch's position, coefficients in the native
basis and as Noll Zernikes, metric and quality flags), and beside it
FILE_preview.png (raw beside restored, same scale), FILE_patches.csv and
FILE_summary.json. With several bursts, --out is a folder.

Large jobs: --shard i/n restores a fixed share of the patches into the part
file FILE.part-i-of-n.fits (FITS tables); --shard array takes i and n from a
job array (SLURM_ARRAY_TASK_ID, and _COUNT or _MIN/_MAX); the environment
alone never shards. "pdwave restore merge --out FILE" assembles the parts
into exactly the output of a single run.

Interruptions: SIGINT or SIGTERM stops after the patches in flight, keeps the
finished ones in FILE.journal/ and prints the command that resumes (the same
command with --resume); a resumed run checks that the inputs' content, the
weights and the settings are those of the journal. FILE.lock keeps a second
run off an output in progress; the lock of a process that died is taken
over. Outputs are checked before any work: none may be an input (under any
spelling), a device or a folder, or a folder holding an input.`,
	Args: cobra.ArbitraryArgs,
	RunE: restoreRun,
}

var restoreMergeOut string

var restoreMergeCmd = &cobra.Command{
	Use:   "merge [PARTS...] --out FILE",
	Short: "Assemble the part files of a sharded restoration",
	Long: `merge reads the part files written by "pdwave restore --shard i/n --out FILE"
for every i (FILE.part-i-of-n.fits; found beside FILE when no PARTS are
named), checks that they come from the same input content, weights and
settings (saying what differs otherwise) and cover every patch exactly once,
and writes the same FITS file and sidecars as a single run (pixels and patch
table identical), recording every shard's command in the provenance.`,
	Args: cobra.ArbitraryArgs,
	RunE: func(cmd *cobra.Command, args []string) error {
		if restoreMergeOut == "" {
			return fmt.Errorf("restore merge: --out is required")
		}
		parts, err := restore.MergeParts(args, restoreMergeOut)
		if err != nil {
			return err
		}
		p, err := restore.MergeFiles(parts, restoreMergeOut, version, "pdwave "+strings.Join(os.Args[1:], " "))
		if err != nil {
			return err
		}
		fmt.Fprintf(os.Stderr, "restore merge: %s: %s\n", restoreMergeOut, p)
		return nil
	},
}

func init() {
	f := restoreCmd.Flags()
	addBurstFlags(restoreCmd)
	o := &restoreFlags
	f.StringVar(&o.out, "out", "", "output FITS file (a folder when restoring several bursts; with --shard, the part files are named after it)")
	f.StringVar(&o.site, "site", "", "site file (YAML): optics the header lacks, seeing for the prior, patch size, basis")
	f.StringVar(&o.weights, "weights", "", "network weight file (default: the built-in weights, if they fit the telescope)")
	f.IntVar(&o.patch, "patch", 0, "patch side, pixels (default: the weights', else the site's, else 64)")
	f.IntVar(&o.overlap, "overlap", -1, "overlap of neighbouring patches, pixels (default: patch/4)")
	f.IntVar(&o.polish, "polish", 0, "classical optimiser iterations after the learned estimate")
	f.IntVar(&o.turns, "turns", infer.DefaultTurns, "average the network over 1, 4 or 8 symmetries of the square (turned patches, turned back)")
	f.BoolVar(&o.fit, "fit", false, "full classical fit in every patch instead of the learned estimate")
	f.StringSliceVar(&o.dark, "dark", nil, "dark frame (FITS, 2-D or a stack to average): one for both cameras, or two (camera 1,camera 2)")
	f.StringSliceVar(&o.flat, "flat", nil, "flat field (FITS, dark-corrected; normalised to mean 1): one for both cameras, or two")
	f.StringSliceVar(&o.bad, "bad", nil, "bad-pixel map (FITS, nonzero = bad): one for both cameras, or two; \"none\": do not look for hot and dead pixels in the dark and flat (default: look)")
	f.StringVar(&o.shard, "shard", "", "restore only share i of n of the patches (i/n, 0-based; or \"array\": from SLURM_ARRAY_TASK_ID and _COUNT or _MIN/_MAX) into the part file FILE.part-i-of-n.fits")
	f.BoolVar(&o.resume, "resume", false, "continue an interrupted run from its journal (FILE.journal)")
	f.IntVar(&o.workers, "workers", 0, "worker goroutines (default: all cores)")
	f.BoolVar(&o.pairs, "pairs", false, "arguments are focused/defocused 3-D files, two by two")
	f.BoolVar(&o.noAlign, "no-align", false, "measure but do not remove the offset between the channels")
	f.StringVar(&o.offset, "offset", "", "known offset DX,DY (pixels) of the defocused channel, instead of measuring it")
	f.BoolVar(&o.quiet, "quiet", false, "no progress line")
	restoreMergeCmd.Flags().StringVar(&restoreMergeOut, "out", "", "output FITS file")
	restoreCmd.AddCommand(restoreMergeCmd)
	root.AddCommand(restoreCmd)
}

// restoreCheckFlags refuses missing, negative, out-of-bounds and
// contradictory flags of "pdwave restore".
func restoreCheckFlags(args []string) error {
	o := restoreFlags
	if len(args) == 0 {
		return fmt.Errorf("restore: no burst files given")
	}
	if o.out == "" {
		return fmt.Errorf("restore: --out is required")
	}
	if o.polish < 0 || o.workers < 0 || o.patch < 0 || o.overlap < -1 {
		return fmt.Errorf("restore: --patch, --overlap, --polish and --workers must not be negative")
	}
	if err := checkWorkers("restore", o.workers); err != nil {
		return err
	}
	if err := exclusive("restore", fmt.Sprintf("--polish %d", o.polish), o.polish > 0, "--fit", o.fit); err != nil {
		return err
	}
	return exclusive("restore", "--offset", o.offset != "", "--no-align", o.noAlign)
}

// restoreCalib returns the calibration files of --dark, --flat and --bad:
// one file serves both cameras, two are camera 1's and camera 2's; --bad
// none turns off the search for hot and dead pixels.
func restoreCalib() (restore.CalibFiles, error) {
	o := restoreFlags
	var f restore.CalibFiles
	for _, fl := range []struct {
		name  string
		files []string
		dst   *[2]string
	}{{"--dark", o.dark, &f.Dark}, {"--flat", o.flat, &f.Flat}, {"--bad", o.bad, &f.Bad}} {
		if fl.name == "--bad" && len(fl.files) == 1 && fl.files[0] == "none" {
			f.NoFind = true
			continue
		}
		switch len(fl.files) {
		case 0:
		case 1:
			*fl.dst = [2]string{fl.files[0], fl.files[0]}
		case 2:
			*fl.dst = [2]string{fl.files[0], fl.files[1]}
		default:
			return f, fmt.Errorf("restore: %s takes one file (both cameras) or two (camera 1,camera 2), got %d", fl.name, len(fl.files))
		}
		for _, p := range fl.dst {
			if p == "" && len(fl.files) > 0 {
				return f, fmt.Errorf("restore: %s: an empty file name", fl.name)
			}
		}
	}
	return f, nil
}

// restoreShard sets the job's shard from --shard ("i/n" or "array"), and
// notes a job-array task that was not asked to shard.
func restoreShard(job *restore.Job, flag string) error {
	if flag != "" {
		sh, err := restore.ParseShardFlag(flag, os.Getenv)
		if err != nil {
			return err
		}
		job.Shard = sh
		if flag == restore.ShardArray {
			fmt.Fprintf(os.Stderr, "restore: shard %v from the job array\n", sh)
		}
	} else if os.Getenv("SLURM_ARRAY_TASK_ID") != "" {
		fmt.Fprintln(os.Stderr, "restore: this is a job-array task but --shard is not given: restoring every patch (--shard array shares them out)")
	}
	return nil
}

// restoreModel loads the site file and the weights (--weights, else the
// built-in ones if they fit; none with --fit) into the job.
func restoreModel(job *restore.Job) error {
	o := restoreFlags
	if o.site != "" {
		s, err := site.Load(o.site)
		if err != nil {
			return err
		}
		job.Site = s
	}
	if o.fit {
		return nil
	}
	switch {
	case o.weights != "":
		m, err := net.Load(o.weights)
		if err != nil {
			return err
		}
		job.Model, job.ModelFrom = m, o.weights
	default:
		m, err := weights.Default()
		if err != nil {
			fmt.Fprintf(os.Stderr, "restore: built-in weights not used: %v\n", err)
		}
		job.Model, job.ModelFrom, job.ModelOptional = m, "built-in ("+weights.DefaultName+")", true
	}
	if job.Model == nil {
		fmt.Fprintln(os.Stderr, "restore: no network weights; using the classical fit in every patch")
	}
	return nil
}

func restoreRun(cmd *cobra.Command, args []string) error {
	o := restoreFlags
	if err := restoreCheckFlags(args); err != nil {
		return err
	}
	fl, err := flagInstrument(cmd.Flags())
	if err != nil {
		return fmt.Errorf("restore: %w", err)
	}
	calib, err := restoreCalib()
	if err != nil {
		return err
	}
	job := &restore.Job{
		Inputs: args, Pairs: o.pairs, Reading: burstOptions(), Out: o.out, Flags: fl, Overlap: o.overlap,
		Polish: o.polish, Turns: o.turns, Fit: o.fit, Calib: calib, NoAlign: o.noAlign,
		Resume: o.resume, Workers: o.workers, Log: os.Stderr, Version: version,
		Command:  "pdwave " + strings.Join(os.Args[1:], " "),
		SiteFile: o.site, WeightsFile: o.weights,
	}
	if os.Getenv("GOGC") == "" {
		job.GCHeadroom = restoreGCHeadroom
	}
	if !o.quiet {
		w, terminal := progress.Stderr()
		job.Progress = w
		if !terminal {
			job.ProgressEvery = restoreLogEvery
		}
	}
	if o.offset != "" {
		var off restore.Offset
		var rest string
		if n, _ := fmt.Sscanf(o.offset, "%g,%g%s", &off.DX, &off.DY, &rest); n != 2 {
			return fmt.Errorf("restore: --offset %q: want DX,DY in pixels, e.g. 0.4,-0.2", o.offset)
		}
		job.Offset = &off
	}
	if err := restoreShard(job, o.shard); err != nil {
		return err
	}
	if err := job.Check(); err != nil {
		return err
	}
	if err := restoreModel(job); err != nil {
		return err
	}
	ctx, intr, stop := catchInterrupts(os.Stderr, "restore")
	defer stop()
	err = job.Run(ctx)
	if s := intr.received(); s != nil && err != nil {
		return stopped(s, err)
	}
	return err
}

// restoreGCHeadroom is the garbage restore lets the collector keep
// (restore.Job.GCHeadroom): the field is held once, and the default
// collector would let garbage grow to its size again. Measured on a
// simulated 1024² × 16 × 2 burst: the wall time is unchanged within the
// machine's noise (the field's 16-bit frames hold no pointers, so a
// collection does not scan them).
const restoreGCHeadroom = 64 << 20

// restoreLogEvery is how often restore logs a progress line when standard
// error is not a terminal.
const restoreLogEvery = 10 * time.Second
