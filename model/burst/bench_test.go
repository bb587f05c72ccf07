package burst

import (
	"path/filepath"
	"testing"
)

// Demo-size burst: 64×64 pixels, 16 frames, 2 channels, 36 modes
// (contract "Shared decisions").
func BenchmarkWriteDemo(b *testing.B) {
	path := filepath.Join(b.TempDir(), "demo.fits")
	bu := testBurst(64, 64, 16, 36)
	b.SetBytes(int64(64 * 64 * 16 * 2 * 4))
	for i := 0; i < b.N; i++ {
		if err := Write(path, bu, nil); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkReadDemo(b *testing.B) {
	path := filepath.Join(b.TempDir(), "demo.fits")
	if err := Write(path, testBurst(64, 64, 16, 36), nil); err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(64 * 64 * 16 * 2 * 4))
	for i := 0; i < b.N; i++ {
		if _, err := Read(path); err != nil {
			b.Fatal(err)
		}
	}
}
