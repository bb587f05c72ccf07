package infer

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"time"

	"pdwave/model/instrument"
	"pdwave/model/site"
	"pdwave/simulate"
)

// StudyJob is "pdwave fit study": the fit's accuracy on bursts simulated
// for one site with known wavefronts, per setting and scene, written as
// Out/fit-study.csv with the summary table on Log.
type StudyJob struct {
	Site     *site.Site
	Cases    []StudyCase // settings (StudyScans)
	Bursts   int         // simulated bursts per setting and scene, ≥ 1
	Scenes   string      // scene selection (SimulatedStudyScenes)
	SceneDir string      // folder of real scenes; "" = simulate.FindSceneDir
	Seed     uint64
	Workers  int    // fits in parallel; ≤ 0 = GOMAXPROCS
	Out      string // output folder, created if missing
	Log      io.Writer
}

// Run simulates and fits every setting and scene, prints a line per row
// as it is done, writes the CSV and prints the summary. It returns the
// CSV's path.
func (j StudyJob) Run() (string, error) {
	simCfg, _, err := simulate.ConfigFromSite(j.Site, instrument.Partial{})
	if err != nil {
		return "", err
	}
	scenes, err := SimulatedStudyScenes(simCfg, j.Scenes, j.images)
	if err != nil {
		return "", fmt.Errorf("--scenes %q: %w", j.Scenes, err)
	}
	if err := os.MkdirAll(j.Out, 0o755); err != nil {
		return "", fmt.Errorf("creating %s: %w", j.Out, err)
	}
	// The study sets patch, frames, diversity and D/r0 per case.
	cfg, err := ConfigFor(instrument.Sources{Site: j.Site.Instrument()}, 0)
	if err != nil {
		return "", err
	}
	workers := j.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	log := j.Log
	if log == nil {
		log = io.Discard
	}
	fmt.Fprintf(log, "%d settings × %d scenes × %d bursts = %d fits on %d workers\n",
		len(j.Cases), len(scenes), j.Bursts, len(j.Cases)*len(scenes)*j.Bursts, workers)
	start := time.Now()
	rows, err := StudyScenes(cfg, j.Cases, j.Bursts, scenes, j.Seed, workers, func(r StudyRow) {
		fmt.Fprintf(log, "D/r0 %4.1f  %3d px  %2d frames  %.1f waves  %-12s error %.3f (2–10), %.3f (2–21), %.2f s per fit\n",
			r.DOverR0, r.Patch, r.Frames, r.DiversityPV, r.Scene, r.Err10, r.Err21, r.Seconds)
	})
	if err != nil {
		return "", err
	}
	path := filepath.Join(j.Out, "fit-study.csv")
	if err := WriteStudyFile(path, rows); err != nil {
		return "", err
	}
	fmt.Fprintf(log, "\nerror = fraction of the true wavefront variance left (1 = no correction); >1 = share of bursts above 1\n")
	if err := WriteStudySummary(log, rows); err != nil {
		return "", err
	}
	fmt.Fprintf(log, "wrote %s (%v)\n", path, time.Since(start).Round(time.Second))
	return path, nil
}

// images loads the real scenes: the FITS files of SceneDir, else of
// simulate.FindSceneDir.
func (j StudyJob) images() (*simulate.ImageScene, error) {
	d := j.SceneDir
	if d == "" {
		var err error
		if d, err = simulate.FindSceneDir(); err != nil {
			return nil, fmt.Errorf("%w (or give --scene-dir, or use --scenes granulation)", err)
		}
	}
	return simulate.LoadSceneDir(d)
}
