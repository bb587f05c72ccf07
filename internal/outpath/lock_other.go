//go:build !unix

package outpath

import "os"

// tryLock has no system lock to take here: the recorded process id and the
// heartbeat decide.
func tryLock(*os.File) (int, error) { return lockNone, nil }

// processAlive cannot check a process here and assumes it runs (a stale
// lock of this host must then be removed by hand; one of another host is
// taken over after StaleAfter).
func processAlive(pid int) bool { return pid > 0 }
