package outpath

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// deadPID returns the id of a process that has exited.
func deadPID(t *testing.T) int {
	t.Helper()
	c := exec.Command("true")
	if err := c.Run(); err != nil {
		t.Skipf("cannot run true: %v", err)
	}
	return c.Process.Pid
}

// TestLock checks a held lock is refused with its file and holder named, a
// released lock is gone, and stale locks (a dead process of this host, a
// silent one of another host) are taken over while a fresh one of another
// host is not. Planted, each seen to fail: ignoring the flock result (the
// second Acquire succeeded), taking every recorded lock as live (the
// liveness rows failed).
func TestLock(t *testing.T) {
	dir := t.TempDir()
	path := LockPath(filepath.Join(dir, "r.fits"))
	l, note, err := Acquire(path, "pdwave restore a.fits")
	if err != nil || note != "" {
		t.Fatalf("first lock: %v (note %q)", err, note)
	}
	_, _, err = Acquire(path, "pdwave restore a.fits")
	if err == nil {
		t.Fatal("second lock on a held output succeeded")
	}
	if msg := err.Error(); !strings.Contains(msg, path) || !strings.Contains(msg, fmt.Sprint(os.Getpid())) {
		t.Errorf("refusal %q does not name the lock and the holder's process id", msg)
	}
	l.Release()
	l.Release()
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Errorf("released lock still there: %v", err)
	}

	host, _ := os.Hostname()
	write := func(pid int, h string, age time.Duration) {
		os.WriteFile(path, []byte(fmt.Sprintf("pid %d\nhost %s\ncommand x\n", pid, h)), 0o644)
		old := time.Now().Add(-age)
		os.Chtimes(path, old, old)
	}
	dead := deadPID(t)
	write(dead, host, 0)
	l, note, err = Acquire(path, "y")
	if err != nil || !strings.Contains(note, fmt.Sprint(dead)) {
		t.Fatalf("stale lock of a dead process: %v (note %q)", err, note)
	}
	l.Release()

	// Another host's record: only the heartbeat can tell. Without system
	// locks on this file system the record decides; with them (the usual
	// case here) the free flock proves the holder gone either way, so only
	// the record's parsing is checked.
	li := lockInfo{pid: 1, host: "elsewhere", mtime: time.Now()}
	if li.gone(host) {
		t.Error("a fresh lock of another host taken as stale")
	}
	li.mtime = time.Now().Add(-2 * StaleAfter)
	if !li.gone(host) {
		t.Error("a silent lock of another host not taken as stale")
	}
	if (lockInfo{pid: dead, host: host}).gone(host) != true || (lockInfo{pid: os.Getppid(), host: host}).gone(host) {
		t.Error("process liveness misjudged")
	}
}
