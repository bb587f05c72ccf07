package cpufeat

import (
	"os"
	"runtime"
	"strings"
	"testing"
)

// On Linux/amd64 the kernel's own reading of the processor flags in
// /proc/cpuinfo must agree with ours (both "avx2" and "fma" listed ⇔
// AVX2FMA). Elsewhere, or with -tags purego, AVX2FMA must be false unless
// the build is amd64.
func TestAgreesWithProcCPUInfo(t *testing.T) {
	if runtime.GOARCH != "amd64" {
		if AVX2FMA {
			t.Fatalf("AVX2FMA true on %s", runtime.GOARCH)
		}
		return
	}
	if haveAVX2FMA() != AVX2FMA {
		t.Fatal("AVX2FMA differs from a fresh check")
	}
	info, err := os.ReadFile("/proc/cpuinfo")
	if err != nil {
		t.Skipf("no /proc/cpuinfo: %v", err)
	}
	var flags []string
	for _, line := range strings.Split(string(info), "\n") {
		if strings.HasPrefix(line, "flags") {
			_, f, _ := strings.Cut(line, ":")
			flags = strings.Fields(f)
			break
		}
	}
	has := func(name string) bool {
		for _, f := range flags {
			if f == name {
				return true
			}
		}
		return false
	}
	want := has("avx2") && has("fma")
	if purego {
		want = false
	}
	if AVX2FMA != want {
		t.Errorf("AVX2FMA = %v, /proc/cpuinfo lists avx2 %v, fma %v (purego %v)", AVX2FMA, has("avx2"), has("fma"), purego)
	}
}
