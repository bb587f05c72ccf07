package compare

import (
	"bytes"
	"encoding/base64"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"html"
	"image"
	_ "image/png"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"pdwave/model/fft"
	"regexp"
	"sort"
	"strconv"
	"strings"
	"testing"

	"pdwave/internal/outpath"
)

// synthReport builds a report from random numbers: a 3×2 grid of patches,
// all four series, an example and spectra. Nothing in it is physical; it
// drives the writers.
func synthReport(seed uint64) *Report {
	rng := rand.New(rand.NewPCG(seed, 1))
	const frames, modes, n = 4, 6, 32
	r := &Report{
		Version: "test", Created: "2026-01-01T00:00:00Z", Source: "synthetic",
		Settings: []Setting{{"polish", "3"}},
		Basis:    BasisInfo{Kind: "kl", Count: modes, N: n, Radius: 8},
		Frames:   frames, Modes: modes, PatchSize: n, FieldNx: 96, FieldNy: 64,
		Methods: []string{Learned, Polished, Fitted, Truth},
	}
	idx := 0
	for y := 0; y < 2; y++ {
		for x := 0; x < 3; x++ {
			p := Patch{Index: idx, X: 32 * x, Y: 32 * y, RawContrast: 0.05 + 0.01*rng.Float64()}
			truth := randCoeffs(rng, frames, modes, 1)
			fit := 2 + rng.Float64()
			for k, m := range r.Methods {
				c := truth
				scale := []float64{0.3, 0.15, 0.05, 0}[k]
				if scale > 0 {
					c = addNoise(rng, truth, scale)
				}
				met := fit * []float64{1.6 + 0.2*rng.Float64(), 1.1, 1, 1.05}[k]
				p.Estimates = append(p.Estimates, Estimate{Method: m, Coeffs: c, Metric: met, Contrast: 0.1 + 0.01*rng.Float64(), Seconds: rng.Float64(), Total: rng.Float64(), Iterations: k})
			}
			r.Patches = append(r.Patches, p)
			idx++
		}
	}
	ex := &Example{Patch: 1, Frame: 2, N: n, Series: r.Methods, Pupil: make([]float64, n*n)}
	for i := range ex.Pupil {
		if math.Hypot(float64(i%n-n/2), float64(i/n-n/2)) <= 8 {
			ex.Pupil[i] = 1
		}
	}
	for range ex.Series {
		ph := make([]float64, n*n)
		for i := range ph {
			ph[i] = rng.NormFloat64()
		}
		ex.Phase = append(ex.Phase, ph)
		for ch := 0; ch < 2; ch++ {
			psf := make([]float64, n*n)
			w := 2.0 + 3*float64(ch)
			for i := range psf {
				d := math.Hypot(float64(i%n-n/2), float64(i/n-n/2))
				psf[i] = math.Exp(-d * d / (2 * w * w))
			}
			ex.PSF[ch] = append(ex.PSF[ch], psf)
		}
	}
	r.Example = ex
	sp := &Spectra{Series: []string{"raw", Learned, Polished, Fitted}, Cutoff: 0.4}
	for b := 0; b <= n/2; b++ {
		sp.Freq = append(sp.Freq, float64(b)/n)
	}
	for k := range sp.Series {
		pw := make([]float64, len(sp.Freq))
		for b := range pw {
			pw[b] = math.Pow(float64(b)+1, -2-0.2*float64(k))
		}
		sp.Power = append(sp.Power, pw)
	}
	r.Spectra = sp
	return r
}

func randCoeffs(rng *rand.Rand, frames, modes int, s float64) [][]float64 {
	c := make([][]float64, frames)
	for f := range c {
		c[f] = make([]float64, modes)
		for m := range c[f] {
			c[f][m] = s * rng.NormFloat64() / float64(m+1)
		}
	}
	return c
}

func addNoise(rng *rand.Rand, c [][]float64, s float64) [][]float64 {
	out := make([][]float64, len(c))
	for f := range c {
		out[f] = make([]float64, len(c[f]))
		for m := range c[f] {
			out[f][m] = c[f][m] + s*rng.NormFloat64()
		}
	}
	return out
}

func readCSV(t *testing.T, data []byte) (map[string]int, [][]string) {
	t.Helper()
	rows, err := csv.NewReader(bytes.NewReader(data)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	return col, rows[1:]
}

func num(t *testing.T, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// checkOutputs recomputes the per-mode statistics, the metric ratios and
// the summary from the written coefficient and patch tables and compares
// them with the written mode table, the JSON report and the HTML page.
func checkOutputs(t *testing.T, files map[string][]byte) {
	t.Helper()
	var rep Report
	if err := json.Unmarshal(files[FileReportJSON], &rep); err != nil {
		t.Fatalf("report.json: %v", err)
	}
	col, rows := readCSV(t, files[FileCoeffsCSV])
	if got, want := len(rows), len(rep.Patches)*rep.Frames*rep.Modes; got != want {
		t.Fatalf("coefficients.csv has %d rows, want %d", got, want)
	}
	sum2 := map[string][]float64{}
	perPatch := map[string]map[[2]int]float64{} // series → (patch, mode) → Σ c²
	for _, s := range rep.Summary.Series {
		sum2[s] = make([]float64, rep.Modes)
		perPatch[s] = map[[2]int]float64{}
	}
	diff2 := map[string][]float64{}
	for _, p := range rep.Summary.Pairs {
		diff2[p.String()] = make([]float64, rep.Modes)
	}
	for _, row := range rows {
		m := int(num(t, row[col["mode"]])) - 1
		pi := int(num(t, row[col["patch"]])) - 1 // 1-based in the CSV
		for _, s := range rep.Summary.Series {
			v := num(t, row[col[s]])
			sum2[s][m] += v * v
			perPatch[s][[2]int{pi, m}] += v * v
		}
		for _, p := range rep.Summary.Pairs {
			d := num(t, row[col[p.A]]) - num(t, row[col[p.B]])
			if w := num(t, row[col[p.A+"_minus_"+p.B]]); math.Abs(w-d) > 1e-12*(1+math.Abs(d)) {
				t.Fatalf("difference column %s: %g, recomputed %g", p, w, d)
			}
			diff2[p.String()][m] += d * d
		}
	}
	mcol, mrows := readCSV(t, files[FileModesCSV])
	if len(mrows) != rep.Modes {
		t.Fatalf("modes.csv has %d rows, want %d", len(mrows), rep.Modes)
	}
	np := float64(len(rep.Patches))
	nf := float64(rep.Frames)
	near := func(what string, got, want float64) {
		t.Helper()
		if math.Abs(got-want) > 1e-12*(1+math.Abs(want)) {
			t.Errorf("%s: written %.15g, recomputed %.15g", what, got, want)
		}
	}
	for m, row := range mrows {
		for k, s := range rep.Summary.Series {
			want := math.Sqrt(sum2[s][m] / (np * nf))
			near(fmt.Sprintf("modes.csv rms_%s mode %d", s, m+1), num(t, row[mcol["rms_"+s]]), want)
			near(fmt.Sprintf("report.json rms %s mode %d", s, m+1), rep.Summary.Modes[m].RMS[k], want)
			var per []float64
			for pi := range rep.Patches {
				per = append(per, math.Sqrt(perPatch[s][[2]int{rep.Patches[pi].Index, m}]/nf))
			}
			near(fmt.Sprintf("modes.csv spread_%s mode %d", s, m+1), num(t, row[mcol["spread_"+s]]), stddev(per))
		}
		for k, p := range rep.Summary.Pairs {
			want := math.Sqrt(diff2[p.String()][m] / (np * nf))
			near(fmt.Sprintf("modes.csv %s mode %d", p, m+1), num(t, row[mcol["rms_"+p.A+"_minus_"+p.B]]), want)
			near(fmt.Sprintf("report.json %s mode %d", p, m+1), rep.Summary.Modes[m].DiffRMS[k], want)
		}
	}
	// Metric ratios and their medians, from patches.csv.
	pcol, prows := readCSV(t, files[FilePatchesCSV])
	page := string(files[FileHTML])
	for k, m := range rep.Summary.RatioMethods {
		var vals []float64
		for i, row := range prows {
			want := num(t, row[pcol["metric_"+m]]) / num(t, row[pcol["metric_"+Fitted]])
			near(fmt.Sprintf("patches.csv ratio %s patch %d", m, i), num(t, row[pcol["objective_ratio_"+m+"_"+Fitted]]), want)
			near(fmt.Sprintf("report.json ratio %s patch %d", m, i), rep.Summary.Ratios[k][i].Value, want)
			vals = append(vals, want)
		}
		sort.Float64s(vals)
		med := median(vals)
		near("median ratio "+m, rep.Summary.MedianRatio[k], med)
		cell := fmt.Sprintf("<td class=\"l\">%s</td><td>", m)
		i := strings.Index(page, cell)
		if i < 0 {
			t.Fatalf("HTML summary row of %s missing", m)
		}
		// The third cell of the summary row is the median ratio.
		cells := regexp.MustCompile(`<td>([^<]*)</td>`).FindAllStringSubmatch(page[i:], 3)
		if got, want := cells[1][1], fmt.Sprintf("%.4g", med); got != want {
			t.Errorf("HTML median ratio %s = %s, recomputed %s", m, got, want)
		}
	}
	// Overall rms differences.
	for k, p := range rep.Summary.Pairs {
		var s2 float64
		for _, d := range diff2[p.String()] {
			s2 += d / (np * nf)
		}
		near("rms diff "+p.String(), rep.Summary.RMSDiff[k], math.Sqrt(s2/float64(rep.Modes)))
	}
}

func TestOutputsRecompute(t *testing.T) {
	r := synthReport(1)
	files, err := Outputs(r)
	if err != nil {
		t.Fatal(err)
	}
	checkOutputs(t, files)
}

func TestFiguresArePNG(t *testing.T) {
	r := synthReport(2)
	if err := Summarise(r); err != nil {
		t.Fatal(err)
	}
	figs, err := Figures(r)
	if err != nil {
		t.Fatal(err)
	}
	want := []string{FigCoeffs, FigScatter, FigRMSDiff, FigWavefront, FigSpectra, FigRatioMap, FigFlagMap}
	if len(figs) != len(want) {
		t.Fatalf("%d figures, want %d", len(figs), len(want))
	}
	for i, f := range figs {
		if f.Name != want[i] {
			t.Errorf("figure %d is %s, want %s", i, f.Name, want[i])
		}
		checkPNG(t, f.Name, f.PNG)
	}
}

// checkPNG decodes a PNG and checks that it is not blank.
func checkPNG(t *testing.T, name string, data []byte) {
	t.Helper()
	img, format, err := image.Decode(bytes.NewReader(data))
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	if format != "png" {
		t.Errorf("%s: format %s", name, format)
	}
	b := img.Bounds()
	if b.Dx() < 100 || b.Dy() < 100 {
		t.Errorf("%s: %v too small", name, b)
	}
	colours := map[[4]uint32]bool{}
	for y := b.Min.Y; y < b.Max.Y; y += 3 {
		for x := b.Min.X; x < b.Max.X; x += 3 {
			r, g, bl, a := img.At(x, y).RGBA()
			colours[[4]uint32{r, g, bl, a}] = true
		}
	}
	if len(colours) < 3 {
		t.Errorf("%s: only %d colours, blank figure", name, len(colours))
	}
}

// checkSelfContained fails if the page refers to anything outside itself.
func checkSelfContained(t *testing.T, page []byte) {
	t.Helper()
	s := strings.ToLower(string(page))
	for _, bad := range []string{"http:", "https:", "<script", "<link", "<iframe", "<object", "<embed", "url(", "@import", "href=", "file:"} {
		if strings.Contains(s, bad) {
			t.Errorf("HTML contains %q", bad)
		}
	}
	srcs := regexp.MustCompile(`src="([^"]*)"`).FindAllStringSubmatch(string(page), -1)
	if len(srcs) == 0 {
		t.Fatal("HTML has no images")
	}
	for _, m := range srcs {
		m[1] = html.UnescapeString(m[1])
		const pre = "data:image/png;base64,"
		if !strings.HasPrefix(m[1], pre) {
			t.Fatalf("image source %.40q is not an embedded PNG", m[1])
		}
		data, err := base64.StdEncoding.DecodeString(m[1][len(pre):])
		if err != nil {
			t.Fatalf("%v near %q", err, m[1][len(pre)+100:len(pre)+130])
		}
		checkPNG(t, "embedded", data)
	}
}

func TestHTMLSelfContained(t *testing.T) {
	r := synthReport(3)
	r.Notes = []string{"a note with <markup> & \"quotes\""}
	files, err := Outputs(r)
	if err != nil {
		t.Fatal(err)
	}
	page := files[FileHTML]
	checkSelfContained(t, page)
	if !bytes.Contains(page, []byte("a note with &lt;markup&gt;")) {
		t.Error("note not escaped into the page")
	}
	for _, f := range FlagNotes {
		if !bytes.Contains(page, []byte(">"+f.Key+"<")) {
			t.Errorf("flag %s not explained", f.Key)
		}
	}
}

func TestFlags(t *testing.T) {
	r := synthReport(4)
	// Patch 0: learned far worse than the fit, order intact.
	r.Patches[0].Find(Learned).Metric = 10 * r.Patches[0].Find(Fitted).Metric
	// Patch 1: polished below the fit (broken order), contrast off.
	p1 := &r.Patches[1]
	p1.Find(Polished).Metric = 0.5 * p1.Find(Fitted).Metric
	p1.Find(Learned).Contrast = 2 * p1.Find(Fitted).Contrast
	p1.Find(Learned).Metric = 1.2 * p1.Find(Fitted).Metric
	// Patch 2: fit above the truth's metric, flat.
	p2 := &r.Patches[2]
	p2.Find(Truth).Metric = 0.9 * p2.Find(Fitted).Metric
	p2.RawContrast = 0.001
	if err := Summarise(r); err != nil {
		t.Fatal(err)
	}
	has := func(p *Patch, f string) bool {
		for _, x := range p.Flags {
			if x == f {
				return true
			}
		}
		return false
	}
	cases := []struct {
		patch int
		flag  string
		want  bool
	}{
		{0, FlagRatio, true}, {0, FlagOrder, false},
		{1, FlagOrder, true}, {1, FlagContrast, true}, {1, FlagRatio, false},
		{2, FlagTruth, true}, {2, FlagFlat, true}, {2, FlagOrder, false},
		{3, FlagRatio, true}, // synthetic learned metric is 1.6× the fit
		{3, FlagTruth, false}, {3, FlagFlat, false},
	}
	for _, c := range cases {
		if got := has(&r.Patches[c.patch], c.flag); got != c.want {
			t.Errorf("patch %d flag %s = %v, want %v (flags %v)", c.patch, c.flag, got, c.want, r.Patches[c.patch].Flags)
		}
	}
	if r.Summary.FlagCount[FlagRatio] != 5 {
		t.Errorf("ratio flag count %d, want 5", r.Summary.FlagCount[FlagRatio])
	}
}

func TestCheckRejects(t *testing.T) {
	r := synthReport(5)
	r.Patches[2].Estimates[1].Coeffs[0][0] = math.NaN()
	if err := Summarise(r); err == nil {
		t.Error("NaN coefficient accepted")
	}
	r = synthReport(5)
	r.Patches[0].Estimates = r.Patches[0].Estimates[:2]
	if err := Summarise(r); err == nil {
		t.Error("missing estimate accepted")
	}
}

// TestWriteDirAtomic checks the folder is replaced whole, that a file
// pdwave did not write in it blocks the replacement (and survives), and that
// a failed report leaves the folder as it was. Planted: replacing without
// outpath.Replaceable deleted "mine.txt" and failed.
func TestWriteDirAtomic(t *testing.T) {
	parent := t.TempDir()
	dir := filepath.Join(parent, "out")
	if err := WriteDir(dir, synthReport(6)); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "mine.txt"), []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := WriteDir(dir, synthReport(7)); err == nil || !strings.Contains(err.Error(), "mine.txt") {
		t.Errorf("replacing a folder with a foreign file: %v", err)
	}
	if _, err := os.Stat(filepath.Join(dir, "mine.txt")); err != nil {
		t.Fatal("a file pdwave did not write was removed")
	}
	os.Remove(filepath.Join(dir, "mine.txt"))
	if err := WriteDir(dir, synthReport(7)); err != nil {
		t.Fatal(err)
	}
	ents, _ := os.ReadDir(parent)
	if len(ents) != 1 {
		var names []string
		for _, e := range ents {
			names = append(names, e.Name())
		}
		t.Errorf("parent holds %v, want only out", names)
	}
	files := map[string][]byte{}
	ents, _ = os.ReadDir(dir)
	for _, e := range ents {
		if e.Name() == outpath.ManifestName {
			continue
		}
		b, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		files[e.Name()] = b
	}
	checkOutputs(t, files)
	// A failing report leaves the folder as it was.
	bad := synthReport(8)
	bad.Frames = 0
	if err := WriteDir(dir, bad); err == nil {
		t.Error("inconsistent report written")
	}
	if _, err := os.Stat(filepath.Join(dir, FileHTML)); err != nil {
		t.Error("previous output lost after a failed write")
	}
}

func TestAzimuthalAverage(t *testing.T) {
	const n = 16
	p := make([]float64, n*n)
	for i := range p {
		p[i] = 3
	}
	dst := make([]float64, n/2+1)
	AzimuthalAverage(dst, p, n)
	for k, v := range dst {
		if math.Abs(v-3) > 1e-15 {
			t.Errorf("constant spectrum: bin %d = %g, want 3", k, v)
		}
	}
	// Power only at |f| = 4 along the axes (4 pixels, wrapped layout):
	// bin 4 holds 4 × 1 over the annulus count, the others nothing.
	for i := range p {
		p[i] = 0
	}
	for _, i := range []int{4, n - 4, 4 * n, (n - 4) * n} {
		p[i] = 1
	}
	AzimuthalAverage(dst, p, n)
	// Annulus 3.5 ≤ r < 4.5 on a 16×16 grid: count the pixels directly.
	cnt := 0
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			fx, fy := x, y
			if fx > n/2 {
				fx -= n
			}
			if fy > n/2 {
				fy -= n
			}
			if r := math.Hypot(float64(fx), float64(fy)); r >= 3.5 && r < 4.5 {
				cnt++
			}
		}
	}
	for k, v := range dst {
		want := 0.0
		if k == 4 {
			want = 4 / float64(cnt)
		}
		if math.Abs(v-want) > 1e-15 {
			t.Errorf("bin %d = %g, want %g", k, v, want)
		}
	}
}

// TestSpectrumIgnoresPlane checks the spectra leave out a restoration's
// mean plane: a pure plane has no power at any non-zero frequency
// (planted: subtracting only the mean leaves the sawtooth's 1/f² power,
// 1e-4 of the level² at the highest bin).
func TestSpectrumIgnoresPlane(t *testing.T) {
	const n = 32
	sc := newScorer(n, 100, fft.NewPlan(n, n))
	img := make([]float64, n*n)
	for i := range img {
		img[i] = 100 + 0.3*float64(i%n) - 0.2*float64(i/n)
	}
	for b, p := range sc.spectrum(img) {
		if p > 1e-20 {
			t.Errorf("bin %d: power %g of a plane, want 0", b, p)
		}
	}
}
