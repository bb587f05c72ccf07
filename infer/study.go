package infer

import (
	"fmt"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/stat"
)

// StudyCase is one point of the accuracy study.
type StudyCase struct {
	DOverR0     float64 // true D/r0 of the simulated bursts (the fit assumes the same)
	Patch       int     // patch side, pixels
	Frames      int     // frames per burst
	DiversityPV float64 // defocus of channel 1, waves peak-to-valley
}

// StudyRow is the result for one StudyCase and one scene over several
// bursts. Errors are fractions of the true wavefront variance left as
// error (ResidualFraction, burst-mean tilt removed): 0 is perfect, 1 is
// what no correction at all leaves.
type StudyRow struct {
	StudyCase
	Scene       string  // scene label (StudyScene.Name, or a group's name for pooled rows; "" from Study)
	Bursts      int     // bursts fitted for this row
	Err10       float64 // mean error over bursts, Noll 2–10
	Err10Median float64 // its median over bursts (midpoint of the two middle values for even counts)
	Err10SD     float64 // its standard deviation over bursts (n − 1; 0 for one burst)
	Err10Max    float64 // its largest value over bursts
	Err10Over1  float64 // share of bursts with error > 1 (worse than no correction), 0…1
	Err21       float64 // the same over Noll 2–21
	Err21Median float64
	Err21SD     float64
	Err21Max    float64
	Err21Over1  float64
	Err10Start  float64 // mean error over Noll 2–10 of the starting point (registered tilts, else zero): what the fit gained
	Seconds     float64 // mean wall time per fit, s
	Iterations  float64 // mean L-BFGS iterations
}

// BurstSource draws one burst with truth for a study case: data
// [channel][frame] N×N and the true Noll coefficients (frames × ≥ 20,
// j = 2…), rad.
type BurstSource func(c StudyCase, rng *rand.Rand) (data [][][]float64, noll [][]float64, err error)

// StudyScene is one scene of a study: the bursts of every case drawn from
// Source give a row labelled Name. Scenes that share a non-empty Group
// also give a pooled row labelled Group over all their bursts (written
// only when at least two scenes share it).
type StudyScene struct {
	Name   string      // row label, e.g. "granulation" or "brick"
	Group  string      // label of the pooled row, e.g. "real"; "" for none
	Source BurstSource // draws the bursts
}

// SyntheticSource returns a BurstSource based on Synthetic with the given
// telescope (the case sets N, frames, diversity and D/r0), Noll modes up to
// jmax and photons per pixel.
func SyntheticSource(base Synthetic) BurstSource {
	return func(c StudyCase, rng *rand.Rand) ([][][]float64, [][]float64, error) {
		s := base
		s.N, s.Frames, s.DOverR0 = c.Patch, c.Frames, c.DOverR0
		s.DiversityPV = []float64{0, c.DiversityPV}
		b, err := s.Burst(rng)
		if err != nil {
			return nil, nil, err
		}
		return b.Data, b.Noll, nil
	}
}

// Study runs the accuracy study on one unnamed source: StudyScenes with
// the single scene {Source: src} (rows have Scene "").
func Study(base Config, cases []StudyCase, bursts int, src BurstSource, seed uint64, workers int, progress func(StudyRow)) ([]StudyRow, error) {
	return StudyScenes(base, cases, bursts, []StudyScene{{Source: src}}, seed, workers, progress)
}

// maxStudyBursts bounds the bursts per row so that the burst index stays
// in the low 20 bits of the seed stream.
const maxStudyBursts = 1 << 20

// StudyScenes runs the accuracy study: for every case and every scene,
// bursts bursts are drawn from the scene's source and fitted with base
// adapted to the case (patch, frames, diversity, D/r0). Burst b of case
// ci is drawn from the stream PCG(seed, ci·2²⁰ + b) for every scene, so a
// scene's rows do not depend on which other scenes run, nor on the worker
// count; sources that draw the scene from its own sub-stream
// (SimulatedSceneSource) then give every scene the same wavefronts.
// Rows come case by case: one per scene in order, then the pooled group
// rows in order of first appearance. progress, if not nil, is called
// after each row.
func StudyScenes(base Config, cases []StudyCase, bursts int, scenes []StudyScene, seed uint64, workers int, progress func(StudyRow)) ([]StudyRow, error) {
	if bursts < 1 || bursts > maxStudyBursts {
		return nil, fmt.Errorf("study: need 1 to %d bursts per case, got %d", maxStudyBursts, bursts)
	}
	groups, err := studyGroups(scenes)
	if err != nil {
		return nil, err
	}
	var rows []StudyRow
	for ci, c := range cases {
		cfg := base
		cfg.Patch, cfg.Frames, cfg.DOverR0 = c.Patch, c.Frames, c.DOverR0
		cfg.Diversity = []float64{0, c.DiversityPV}
		f, err := NewFitter(cfg)
		if err != nil {
			return rows, fmt.Errorf("study case %+v: %w", c, err)
		}
		pooled := make(map[string][]burstOutcome, len(groups))
		for _, sc := range scenes {
			out, err := studyScene(f, c, ci, bursts, sc, seed, workers)
			if err != nil {
				return rows, fmt.Errorf("study case %+v, scene %q: %w", c, sc.Name, err)
			}
			if sc.Group != "" {
				pooled[sc.Group] = append(pooled[sc.Group], out...)
			}
			rows = appendRow(rows, summarise(c, sc.Name, out), progress)
		}
		for _, g := range groups {
			rows = appendRow(rows, summarise(c, g, pooled[g]), progress)
		}
	}
	return rows, nil
}

func appendRow(rows []StudyRow, r StudyRow, progress func(StudyRow)) []StudyRow {
	if progress != nil {
		progress(r)
	}
	return append(rows, r)
}

// studyGroups checks the scenes (at least one, sources set, labels
// unique among scenes and groups) and returns the groups shared by at
// least two scenes, in order of first appearance.
func studyGroups(scenes []StudyScene) ([]string, error) {
	if len(scenes) == 0 {
		return nil, fmt.Errorf("study: no scenes")
	}
	names := make(map[string]bool, len(scenes))
	count := make(map[string]int)
	var order []string
	for i, sc := range scenes {
		if sc.Source == nil {
			return nil, fmt.Errorf("study: scene %d (%q) has no source", i, sc.Name)
		}
		if names[sc.Name] {
			return nil, fmt.Errorf("study: scene %q listed twice", sc.Name)
		}
		names[sc.Name] = true
		if sc.Group != "" {
			if count[sc.Group] == 0 {
				order = append(order, sc.Group)
			}
			count[sc.Group]++
		}
	}
	var groups []string
	for _, g := range order {
		if names[g] {
			return nil, fmt.Errorf("study: group %q has the name of a scene", g)
		}
		if count[g] >= 2 {
			groups = append(groups, g)
		}
	}
	return groups, nil
}

// burstOutcome is what one fitted burst contributes to a row.
type burstOutcome struct {
	err10, err21, start10 float64
	seconds, iterations   float64
}

// studyScene draws and fits the bursts of one case and scene.
func studyScene(f *Fitter, c StudyCase, ci, bursts int, sc StudyScene, seed uint64, workers int) ([]burstOutcome, error) {
	patches := make([]Patch, bursts)
	truths := make([][][]float64, bursts)
	for b := range patches {
		rng := rand.New(rand.NewPCG(seed, uint64(ci)<<20|uint64(b)))
		d, t, err := sc.Source(c, rng)
		if err != nil {
			return nil, fmt.Errorf("burst %d: %w", b, err)
		}
		patches[b].Data, truths[b] = d, t
	}
	res, err := f.FitAll(patches, workers)
	if err != nil {
		return nil, err
	}
	out := make([]burstOutcome, bursts)
	for b, r := range res {
		o := &out[b]
		for _, e := range []struct {
			dst  *float64
			fit  [][]float64
			jmax int
		}{{&o.err10, r.Noll, 10}, {&o.err21, r.Noll, 21}, {&o.start10, r.StartNoll, 10}} {
			if *e.dst, err = ResidualFraction(e.fit, truths[b], e.jmax); err != nil {
				return nil, fmt.Errorf("burst %d: %w", b, err)
			}
		}
		o.seconds, o.iterations = r.Elapsed.Seconds(), float64(r.Iterations)
	}
	return out, nil
}

// summarise makes the row of case c labelled scene from its bursts.
func summarise(c StudyCase, scene string, out []burstOutcome) StudyRow {
	n := len(out)
	e10, e21 := make([]float64, n), make([]float64, n)
	st, sec, it := make([]float64, n), make([]float64, n), make([]float64, n)
	for i, o := range out {
		e10[i], e21[i], st[i], sec[i], it[i] = o.err10, o.err21, o.start10, o.seconds, o.iterations
	}
	r := StudyRow{StudyCase: c, Scene: scene, Bursts: n,
		Err10Start: stat.Mean(st, nil), Seconds: stat.Mean(sec, nil), Iterations: stat.Mean(it, nil)}
	r.Err10, r.Err10Median, r.Err10SD, r.Err10Max, r.Err10Over1 = spread(e10)
	r.Err21, r.Err21Median, r.Err21SD, r.Err21Max, r.Err21Over1 = spread(e21)
	return r
}

// spread returns the mean, median (midpoint of the middle two for even
// counts), standard deviation (n − 1; 0 for one value), maximum and the
// share of values above 1 of x (not empty).
func spread(x []float64) (mean, median, sd, hi, over1 float64) {
	mean = stat.Mean(x, nil)
	if len(x) > 1 {
		sd = stat.StdDev(x, nil)
	}
	s := slices.Clone(x)
	slices.Sort(s)
	n := len(s)
	median = s[n/2]
	if n%2 == 0 {
		median = (s[n/2-1] + s[n/2]) / 2
	}
	for _, v := range s {
		if v > 1 {
			over1++
		}
	}
	return mean, median, sd, s[n-1], over1 / float64(n)
}
