//go:build linux

package progress

import (
	"os"
	"syscall"
	"unsafe"
)

// isTerminal asks for the terminal attributes (ioctl TCGETS, termios(3)):
// only a terminal has them.
func isTerminal(f *os.File) bool {
	var t syscall.Termios
	_, _, e := syscall.Syscall(syscall.SYS_IOCTL, f.Fd(), syscall.TCGETS, uintptr(unsafe.Pointer(&t)))
	return e == 0
}
