package main

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
)

// restoreRSSConstant is the constant of restore's memory bound: the peak
// resident memory of a run beyond twice the burst file's size. Measured
// on the 1024² × 16 × 2 16-bit burst of the test (67.1 MB): 199–212 MB,
// 65–78 MB beyond 2 × the file: about 70 MB of program, weights and plans;
// the field, held as 16-bit integers, is 1 × the file, and the
// output-sized arrays (mean, mosaic sum, the product as
// written: about 40 bytes per pixel) fit in the second 64 bytes per pixel
// of 16 frames × 2 channels. With the field stored as float32 it peaked at
// 306 MB. The constant allowed is 120 MiB: 45 MB of margin over the
// largest measured (the collector varies by about ±15 MB), while the
// float32 field (306 MB against a bound of about 260 MB) still fails.
const restoreRSSConstant = 120 << 20

// TestRestoreMemory restores a simulated 1024² × 16 frames × 2 channels
// burst, rewritten as unsigned 16-bit integers as cameras write them
// (BITPIX 16, BZERO 32768: FITS Standard 4.0 §5.3, Table 11), in a child
// process and checks its peak resident memory (getrusage ru_maxrss, Linux
// kB) against 2 × the file's size + restoreRSSConstant. Not a timing
// test. Planted: the field stored as float32 (the reader and Field of the
// previous version) fails it (306 MB against a bound of 239 MB).
func TestRestoreMemory(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates and restores a 1024² field")
	}
	dir := t.TempDir()
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	demo := filepath.Join(repo, "testdata", "demo-site.yaml")
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", demo, "--out", filepath.Join(dir, "sim"), "--field", "1024", "--frames", "16"); code != 0 {
		t.Fatalf("simulate: exit %d\n%s", code, stderr)
	}
	path := filepath.Join(dir, "burst16.fits")
	to16Bit(t, filepath.Join(dir, "sim", "burst-0001.fits"), path)
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	// The child's ru_maxrss is at least this process's peak (see to16Bit).
	var self syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &self); err != nil {
		t.Fatal(err)
	}
	rss := childRSS(t, repo, "restore", path, "--site", demo, "--out", filepath.Join(dir, "r.fits"), "--quiet")
	bound := 2*st.Size() + restoreRSSConstant
	t.Logf("file %.1f MB, peak RSS %.1f MB, bound %.1f MB (the test process's own peak %.1f MB)", float64(st.Size())/1e6, float64(rss)/1e6, float64(bound)/1e6, float64(self.Maxrss<<10)/1e6)
	if rss > bound {
		t.Errorf("restore of a %d-byte burst peaked at %d bytes, more than 2 × the file + %d", st.Size(), rss, int64(restoreRSSConstant))
	}
}

// to16Bit rewrites the primary image of the BITPIX −32 file src, whose
// pixels are whole counts in 0…65535 (the simulated camera's), as
// unsigned 16-bit integers in dst (BITPIX 16, BZERO 32768), keeping the
// primary header's other cards and dropping the extensions. It streams:
// the child's ru_maxrss counts the parent's resident memory at the fork
// (the child shares the parent's memory until exec, Linux getrusage(2)),
// so the parent must stay small.
func to16Bit(t *testing.T, src, dst string) {
	t.Helper()
	in, err := os.Open(src)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Close()
	r := bufio.NewReader(in)
	hdr, n := to16BitHeader(t, r, src)
	out, err := os.Create(dst)
	if err != nil {
		t.Fatal(err)
	}
	defer out.Close()
	w := bufio.NewWriter(out)
	w.Write(hdr)
	var b [4]byte
	for k := range n {
		if _, err := io.ReadFull(r, b[:]); err != nil {
			t.Fatalf("%s: pixel %d: %v", src, k, err)
		}
		v := math.Float32frombits(binary.BigEndian.Uint32(b[:]))
		if v != float32(math.Round(float64(v))) || v < 0 || v > math.MaxUint16 {
			t.Fatalf("%s: pixel %d is %g, not a 16-bit count", src, k, v)
		}
		binary.BigEndian.PutUint16(b[:], uint16(int(v)-32768))
		w.Write(b[:2])
	}
	w.Write(make([]byte, (2880-2*n%2880)%2880))
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
}

// to16BitHeader reads the primary header of src from r and returns it
// rewritten for to16Bit (padded to whole blocks) and the pixel count.
func to16BitHeader(t *testing.T, r io.Reader, src string) ([]byte, int) {
	t.Helper()
	var hdr []byte
	n := 1
	c := make([]byte, 80)
	for k := 1; ; k++ {
		if _, err := io.ReadFull(r, c); err != nil {
			t.Fatalf("%s: header: %v", src, err)
		}
		key := strings.TrimSpace(string(c[:8]))
		if key == "END" {
			// skip the rest of the header's last block
			if _, err := io.CopyN(io.Discard, r, int64((2880-80*k%2880)%2880)); err != nil {
				t.Fatalf("%s: header: %v", src, err)
			}
			break
		}
		switch {
		case key == "BITPIX":
			copy(c, fmt.Sprintf("%-80s", fitsCard("BITPIX", 16)))
		case strings.HasPrefix(key, "NAXIS") && key != "NAXIS":
			v, err := strconv.Atoi(strings.TrimSpace(strings.SplitN(string(c[10:]), "/", 2)[0]))
			if err != nil {
				t.Fatalf("%s: %s: %v", src, key, err)
			}
			n *= v
		}
		hdr = append(hdr, c...)
	}
	hdr = fmt.Appendf(hdr, "%-80s%-80s%-80s", fitsCard("BZERO", 32768), fitsCard("BSCALE", 1), "END")
	return pad2880(hdr, ' '), n
}

// pad2880 pads b with pad to whole 2880-byte FITS blocks (FITS Standard
// 4.0 §3.3.2).
func pad2880(b []byte, pad byte) []byte {
	for len(b)%2880 != 0 {
		b = append(b, pad)
	}
	return b
}

// childRSS runs pdwave with args in a child process (as runCLI) and
// returns its peak resident memory in bytes.
func childRSS(t *testing.T, dir string, args ...string) int64 {
	t.Helper()
	c := cliCommand(t, dir, args...)
	if out, err := c.CombinedOutput(); err != nil {
		t.Fatalf("pdwave %v: %v\n%s", args, err, out)
	}
	ru, ok := c.ProcessState.SysUsage().(*syscall.Rusage)
	if !ok {
		t.Skip("no resource usage of the child on this system")
	}
	return ru.Maxrss << 10 // kB on Linux
}
