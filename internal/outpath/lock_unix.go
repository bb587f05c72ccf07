//go:build unix

package outpath

import (
	"errors"
	"os"
	"syscall"
)

// tryLock takes an exclusive flock(2) on f without waiting and returns
// lockTaken, lockBusy (another open file holds it) or lockNone (the file
// system has no locks).
func tryLock(f *os.File) (int, error) {
	err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB)
	switch {
	case err == nil:
		return lockTaken, nil
	case errors.Is(err, syscall.EWOULDBLOCK):
		return lockBusy, nil
	case errors.Is(err, syscall.ENOTSUP) || errors.Is(err, syscall.ENOLCK) || errors.Is(err, syscall.EINVAL):
		return lockNone, nil
	}
	return lockBusy, err
}

// processAlive reports whether a process with id pid runs on this host
// (kill(pid, 0), POSIX.1-2017: EPERM means it exists under another user).
func processAlive(pid int) bool {
	if pid <= 0 {
		return false
	}
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}
