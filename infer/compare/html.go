package compare

import (
	"bytes"
	"encoding/base64"
	"fmt"
	"html/template"
	"sort"
	"strings"

	"gonum.org/v1/gonum/stat"
)

// htmlMethodRow is one row of the page's summary table.
type htmlMethodRow struct {
	Method         string
	MedianMetric   float64
	MedianRatio    string // to the fit, "" when not applicable
	MedianContrast float64
	MeanSeconds    float64
	MeanTotal      float64
}

type htmlFigure struct {
	Figure
	Src template.URL
}

type htmlPage struct {
	R       *Report
	Methods []htmlMethodRow
	Figures []htmlFigure
	Flags   []Setting
	Counts  map[string]int
	Pairs   []string
	Files   []string

	ModeHead, PatchHead []string
	ModeRows, PatchRows [][]string
}

// HTML renders the self-contained report page: inline CSS, figures embedded
// as base64 data URIs, no scripts, no links to anything outside the page.
// The report must be summarised (Summarise); figs are usually Figures(r).
func HTML(r *Report, figs []Figure) ([]byte, error) {
	pg := htmlPage{R: r, Flags: FlagNotes, Counts: r.Summary.FlagCount}
	for _, f := range figs {
		pg.Figures = append(pg.Figures, htmlFigure{Figure: f, Src: template.URL("data:image/png;base64," + base64.StdEncoding.EncodeToString(f.PNG))})
	}
	for _, p := range r.Summary.Pairs {
		pg.Pairs = append(pg.Pairs, p.A+" − "+p.B)
	}
	pg.Methods = htmlMethodRows(r)
	pg.ModeHead, pg.ModeRows = htmlModeTable(r, pg.Pairs)
	pg.PatchHead, pg.PatchRows = htmlPatchTable(r)
	pg.Files = []string{FileCoeffsCSV, FilePatchesCSV, FileModesCSV, FileSpectraCSV, FileReportJSON, FilePatchesJSON, FileModesJSON}
	for _, f := range figs {
		pg.Files = append(pg.Files, f.Name)
	}
	sort.Strings(pg.Files)
	var buf bytes.Buffer
	if err := htmlTemplate.Execute(&buf, pg); err != nil {
		return nil, fmt.Errorf("rendering report page: %w", err)
	}
	return buf.Bytes(), nil
}

// htmlMethodRows returns one summary row per method: the patch medians of
// metric and contrast, the median ratio to the fit ("1" for the fit, ""
// when there is none) and the patch means of the times, seconds.
func htmlMethodRows(r *Report) []htmlMethodRow {
	var rows []htmlMethodRow
	for _, m := range r.Methods {
		row := htmlMethodRow{Method: m}
		var met, con, sec, tot []float64
		for i := range r.Patches {
			e := r.Patches[i].Find(m)
			met = append(met, e.Metric)
			con = append(con, e.Contrast)
			sec = append(sec, e.Seconds)
			tot = append(tot, e.Total)
		}
		row.MedianMetric, row.MedianContrast = median(met), median(con)
		row.MeanSeconds, row.MeanTotal = stat.Mean(sec, nil), stat.Mean(tot, nil)
		for k, rm := range r.Summary.RatioMethods {
			if rm == m {
				row.MedianRatio = fmt.Sprintf("%.4g", r.Summary.MedianRatio[k])
			}
		}
		if m == Fitted {
			row.MedianRatio = "1"
		}
		rows = append(rows, row)
	}
	return rows
}

// htmlG formats a table value with four significant digits.
func htmlG(v float64) string { return fmt.Sprintf("%.4g", v) }

// htmlModeTable returns the head and rows of the per-mode table: RMS and
// spread per series, then the RMS of each difference (pairs are the
// difference labels, in Summary.Pairs order).
func htmlModeTable(r *Report, pairs []string) (head []string, rows [][]string) {
	head = []string{"mode"}
	for _, sr := range r.Summary.Series {
		head = append(head, "rms "+sr, "spread "+sr)
	}
	for _, p := range pairs {
		head = append(head, "rms "+p)
	}
	for _, st := range r.Summary.Modes {
		row := []string{fmt.Sprint(st.Mode)}
		for k := range r.Summary.Series {
			row = append(row, htmlG(st.RMS[k]), htmlG(st.Spread[k]))
		}
		for k := range r.Summary.Pairs {
			row = append(row, htmlG(st.DiffRMS[k]))
		}
		rows = append(rows, row)
	}
	return head, rows
}

// htmlPatchTable returns the head and rows of the per-patch table: origin
// and raw contrast, the metric of each method, the ratios to the fit, the
// contrasts, the times in milliseconds (not for the truth) and the flags.
func htmlPatchTable(r *Report) (head []string, rows [][]string) {
	head = []string{"patch", "x", "y", "raw contrast"}
	for _, m := range r.Methods {
		head = append(head, "metric "+m)
	}
	for _, m := range r.Summary.RatioMethods {
		head = append(head, "ratio "+m+"/"+Fitted)
	}
	for _, m := range r.Methods {
		head = append(head, "contrast "+m)
	}
	for _, m := range r.Methods {
		if m != Truth {
			head = append(head, "ms "+m)
		}
	}
	head = append(head, "flags")
	for i := range r.Patches {
		p := &r.Patches[i]
		row := []string{fmt.Sprint(p.Index), fmt.Sprint(p.X), fmt.Sprint(p.Y), htmlG(p.RawContrast)}
		for _, e := range p.Estimates {
			row = append(row, htmlG(e.Metric))
		}
		for k := range r.Summary.RatioMethods {
			row = append(row, htmlG(r.Summary.Ratios[k][i].Value))
		}
		for _, e := range p.Estimates {
			row = append(row, htmlG(e.Contrast))
		}
		for _, e := range p.Estimates {
			if e.Method != Truth {
				row = append(row, fmt.Sprintf("%.3g", 1000*e.Seconds))
			}
		}
		row = append(row, strings.Join(p.Flags, " "))
		rows = append(rows, row)
	}
	return head, rows
}

var htmlTemplate = template.Must(template.New("page").Funcs(template.FuncMap{
	"g": func(v float64) string { return fmt.Sprintf("%.4g", v) },
	"ms": func(v float64) string {
		return fmt.Sprintf("%.3g", 1000*v)
	},
	"join": strings.Join,
	"at":   func(x []float64, i int) float64 { return x[i] },
}).Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>pdwave comparison: learned and fitted wavefronts</title>
<style>
body { font-family: sans-serif; margin: 1.5em auto; max-width: 70em; color: #222; line-height: 1.4; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; border-bottom: 1px solid #ccc; margin-top: 2em; }
table { border-collapse: collapse; margin: 0.5em 0; font-size: 0.9em; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.5em; text-align: right; }
th { background: #f0f0f0; } td.l, th.l { text-align: left; }
figure { margin: 1em 0; } figure img { max-width: 100%; border: 1px solid #ddd; }
figcaption { font-size: 0.9em; color: #444; max-width: 60em; }
.note { background: #fff8e0; border-left: 4px solid #e0b000; padding: 0.4em 0.8em; }
.flag { color: #a00; font-weight: bold; }
.scroll { max-height: 30em; overflow: auto; }
</style>
</head>
<body>
<h1>Learned and fitted wavefronts, patch by patch</h1>
<p>Source <code>{{.R.Source}}</code>: {{len .R.Patches}} patch(es) of {{.R.PatchSize}}×{{.R.PatchSize}} pixels from a {{.R.FieldNx}}×{{.R.FieldNy}} field, {{.R.Frames}} frames, {{.R.Modes}} {{.R.Basis.Kind}} modes. Methods: {{join .R.Methods ", "}}.</p>
{{range .R.Notes}}<p class="note">{{.}}</p>
{{end}}
<h2>Summary</h2>
<p>The metric is the objective of the classical fit (phase-diversity metric plus turbulence prior) evaluated at each method's coefficients on the same data; lower is better. The ratio is the metric divided by the fitted metric, so 1 means as good as the fit.</p>
<table>
<tr><th class="l">method</th><th>median metric</th><th>median ratio to fit</th><th>median restored contrast</th><th>mean stage time (ms)</th><th>mean time to estimate (ms)</th></tr>
{{range .Methods}}<tr><td class="l">{{.Method}}</td><td>{{g .MedianMetric}}</td><td>{{.MedianRatio}}</td><td>{{g .MedianContrast}}</td><td>{{ms .MeanSeconds}}</td><td>{{ms .MeanTotal}}</td></tr>
{{end}}</table>
{{if .Pairs}}<table>
<tr><th class="l">difference</th><th>rms over patches, frames, modes (rad)</th></tr>
{{range $k, $p := .Pairs}}<tr><td class="l">{{$p}}</td><td>{{g (at $.R.Summary.RMSDiff $k)}}</td></tr>
{{end}}</table>{{end}}

<h2>How to read the quality flags</h2>
<p>Each patch may carry flags; a patch without flags is one where the learned estimate can be used as it is. Counts over this report are given in brackets.</p>
<ul>
{{range .Flags}}<li><span class="flag">{{.Key}}</span> ({{index $.Counts .Key}}): {{.Value}}</li>
{{end}}</ul>

<h2>Figures</h2>
{{range .Figures}}<figure>
<img src="{{.Src}}" alt="{{.Title}}">
<figcaption><b>{{.Title}}.</b> {{.Caption}}</figcaption>
</figure>
{{end}}

<h2>Per mode</h2>
<div class="scroll"><table>
<tr>{{range .ModeHead}}<th>{{.}}</th>{{end}}</tr>
{{range .ModeRows}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>
{{end}}</table></div>

<h2>Per patch</h2>
<div class="scroll"><table>
<tr>{{range .PatchHead}}<th>{{.}}</th>{{end}}</tr>
{{range .PatchRows}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>
{{end}}</table></div>

<h2>Provenance</h2>
<table>
<tr><td class="l">pdwave version</td><td class="l">{{.R.Version}}</td></tr>
<tr><td class="l">created</td><td class="l">{{.R.Created}}</td></tr>
<tr><td class="l">source</td><td class="l">{{.R.Source}}</td></tr>
<tr><td class="l">basis</td><td class="l">{{.R.Basis.Kind}}, {{.R.Basis.Count}} modes (piston excluded), grid {{.R.Basis.N}} px, pupil radius {{g .R.Basis.Radius}} px</td></tr>
{{range .R.Settings}}<tr><td class="l">{{.Key}}</td><td class="l">{{.Value}}</td></tr>
{{end}}</table>
<p>Files in this folder: {{join .Files ", "}}. Coefficients are in radians in the basis above, frames × modes; mode numbers count from 1.</p>
</body>
</html>
`))
