package compare

import (
	"bytes"
	"context"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
)

// needChromium returns the headless browser, skipping the test when it is
// missing outside CI and failing it in CI (.ci/run installs chromium).
func needChromium(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") != "" {
		t.Fatal("chromium is required in CI")
	}
	t.Skip("chromium not installed")
	return ""
}

// runChromium runs headless Chromium offline on the local file page with
// the extra flags, its profile, home and caches inside dir, and returns
// its standard output.
func runChromium(t *testing.T, bin, dir, page string, flags ...string) []byte {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	home := filepath.Join(dir, "home")
	args := append([]string{"--headless=new", "--no-sandbox", "--disable-gpu", "--no-first-run",
		"--disable-extensions", "--disable-background-networking", "--host-resolver-rules=MAP * ~NOTFOUND",
		"--user-data-dir=" + filepath.Join(dir, "profile"), "--virtual-time-budget=10000"}, flags...)
	c := exec.CommandContext(ctx, bin, append(args, "file://"+page)...)
	c.Env = append(os.Environ(), "HOME="+home, "XDG_CONFIG_HOME="+filepath.Join(home, ".config"),
		"XDG_CACHE_HOME="+filepath.Join(home, ".cache"))
	var out, errb bytes.Buffer
	c.Stdout, c.Stderr = &out, &errb
	if err := c.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", flags, err, errb.Bytes())
	}
	return out.Bytes()
}

// probeScript marks, once the page has loaded, how many of its images
// decoded (naturalWidth > 0) in an element the dumped DOM shows.
const probeScript = `<script>window.addEventListener("load", function () {
  var ok = 0, bad = 0;
  for (const i of document.images) { if (i.complete && i.naturalWidth > 0) ok++; else bad++; }
  var d = document.createElement("div"); d.id = "probe";
  d.textContent = "images=" + document.images.length + " loaded=" + ok + " broken=" + bad;
  document.body.appendChild(d);
});</script>`

var probeRE = regexp.MustCompile(`<div id="probe">images=(\d+) loaded=(\d+) broken=(\d+)</div>`)

// probe writes page with probeScript added as name in dir, opens it in
// the browser and returns the probe's counts "images=N loaded=N broken=N".
func probe(t *testing.T, bin, dir, name string, page []byte) string {
	t.Helper()
	i := bytes.LastIndex(page, []byte("</body>"))
	if i < 0 {
		t.Fatal("the page has no </body>")
	}
	probed := append(append(append([]byte(nil), page[:i]...), probeScript...), page[i:]...)
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, probed, 0o644); err != nil {
		t.Fatal(err)
	}
	m := probeRE.FindSubmatch(runChromium(t, bin, dir, p, "--dump-dom"))
	if m == nil {
		t.Fatalf("%s: no probe in the dumped DOM (the page's load event never came?)", name)
	}
	return strings.TrimPrefix(string(m[0][:len(m[0])-len("</div>")]), `<div id="probe">`)
}

// TestReportInBrowser opens the compare report in headless Chromium, as a
// reader would: every <img> of report.html decodes (naturalWidth > 0,
// counted by a script added to a copy of the page, since the report itself
// has none), and a screenshot of the page is not blank (share of non-white
// pixels, spread of grey levels). The negative control breaks one image's
// data URI in another copy, which the probe must count as broken. Planted:
// HTML writing the figures' base64 one character short fails here.
func TestReportInBrowser(t *testing.T) {
	bin := needChromium(t)
	dir := t.TempDir()
	out := filepath.Join(dir, "report")
	if err := WriteDir(out, synthReport(4)); err != nil {
		t.Fatal(err)
	}
	page, err := os.ReadFile(filepath.Join(out, FileHTML))
	if err != nil {
		t.Fatal(err)
	}
	n := bytes.Count(page, []byte("<img "))
	if n == 0 {
		t.Fatal("the report has no images")
	}
	if got, want := probe(t, bin, out, "probe.html", page), "images="+strconv.Itoa(n)+" loaded="+strconv.Itoa(n)+" broken=0"; got != want {
		t.Errorf("in the browser: %s, want %s", got, want)
	}
	broken := bytes.Replace(page, []byte(`src="data:image/png;base64,`), []byte(`src="data:image/png;base64,AAAA`), 1)
	if got, want := probe(t, bin, out, "broken.html", broken), "images="+strconv.Itoa(n)+" loaded="+strconv.Itoa(n-1)+" broken=1"; got != want {
		t.Errorf("negative control, one image broken: %s, want %s", got, want)
	}

	shot := filepath.Join(dir, "shot.png")
	runChromium(t, bin, dir, filepath.Join(out, FileHTML), "--window-size=1200,2400", "--hide-scrollbars", "--screenshot="+shot)
	f, err := os.Open(shot)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	b := img.Bounds()
	var grey []float64
	dark := 0
	for y := b.Min.Y; y < b.Max.Y; y += 2 {
		for x := b.Min.X; x < b.Max.X; x += 2 {
			r, g, bl, _ := img.At(x, y).RGBA()
			v := (0.299*float64(r) + 0.587*float64(g) + 0.114*float64(bl)) / 0xffff // ITU-R BT.601 luma
			grey = append(grey, v)
			if v < 0.9 {
				dark++
			}
		}
	}
	share, spread := float64(dark)/float64(len(grey)), stat.StdDev(grey, nil)
	t.Logf("screenshot %v: %.1f %% non-white, grey level s.d. %.3f", b.Size(), 100*share, spread)
	if share < 0.01 || spread < 0.03 { // a white page: 0 and 0; this report: about 5 % and 0.11
		t.Errorf("the screenshot looks blank: %.1f %% non-white pixels, grey level s.d. %.3f", 100*share, spread)
	}
}
