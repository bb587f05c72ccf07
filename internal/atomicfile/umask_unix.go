//go:build unix

package atomicfile

import (
	"os"
	"sync"
	"syscall"
)

var (
	umaskOnce  sync.Once
	umaskValue os.FileMode
)

// umask returns the process umask, read once at first use (setting it to 0
// and back, before any file of this package is created).
func umask() os.FileMode {
	umaskOnce.Do(func() {
		m := syscall.Umask(0)
		syscall.Umask(m)
		umaskValue = os.FileMode(m) & os.ModePerm
	})
	return umaskValue
}
