//go:build !linux

package progress

import "os"

// isTerminal takes a character device for a terminal (without the terminal
// request of Linux this also takes /dev/null for one).
func isTerminal(f *os.File) bool {
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
