package outpath

import (
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"
	"sync"
	"time"
)

// LockPath returns the lock file of the output out: out + ".lock".
func LockPath(out string) string { return out + ".lock" }

// Heartbeat is how often a held lock's modification time is refreshed, and
// StaleAfter how old it must be before a lock recorded by another host is
// taken to be abandoned (a process on this host is checked directly).
const (
	Heartbeat  = 30 * time.Second
	StaleAfter = 4 * Heartbeat
)

// Lock keeps a second run off an output in progress: a file beside the
// output recording the holder's process id, host, start time and command.
// On Unix the file is also locked with flock(2), which the system releases
// when the holder dies.
type Lock struct {
	path string
	f    *os.File
	stop chan struct{}
	once sync.Once
}

// lockInfo is what a lock file records.
type lockInfo struct {
	pid     int
	host    string
	command string
	mtime   time.Time
}

// Acquire takes the lock file path for command (recorded for whoever
// finds it taken). A lock held by a running process is refused with an
// error naming the lock file and the holder's process id (and host); a
// lock left by a process that is gone (on this host: not running; on
// another host: not refreshed for StaleAfter) is taken over, and note says
// so ("" otherwise).
func Acquire(path, command string) (l *Lock, note string, err error) {
	for attempt := 0; attempt < 3; attempt++ {
		l, note, err = acquireOnce(path, command)
		if !errors.Is(err, errRetry) {
			return l, note, err
		}
	}
	return nil, "", fmt.Errorf("lock %s keeps changing; is another run starting on the same output?", path)
}

var errRetry = errors.New("retry")

// States of a system lock attempt (tryLock).
const (
	lockTaken = iota // the system lock is ours
	lockBusy         // another process holds it
	lockNone         // the file system has no locks
)

// acquireOnce makes one attempt at Acquire.
func acquireOnce(path, command string) (*Lock, string, error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, "", fmt.Errorf("taking lock %s: %w", path, err)
	}
	state, err := tryLock(f)
	if err != nil {
		f.Close()
		return nil, "", fmt.Errorf("taking lock %s: %w", path, err)
	}
	old := readLock(f)
	host, _ := os.Hostname()
	// A system lock taken proves the recorded holder gone; without system
	// locks, the record decides.
	if state == lockBusy || (state == lockNone && old.pid != 0 && !old.gone(host)) {
		f.Close()
		who := fmt.Sprintf("process %d", old.pid)
		if old.host != "" && old.host != host {
			who += " on " + old.host
		}
		if old.pid == 0 {
			who = "another process"
		}
		return nil, "", fmt.Errorf("the output is in use by %s (lock %s); wait for it to finish, or remove the lock if that process is gone", who, path)
	}
	// The file may have been removed by its previous holder between our
	// open and our lock: then we hold a lock on a name nobody sees.
	if st, err := os.Stat(path); err != nil || !sameOpen(f, st) {
		f.Close()
		return nil, "", errRetry
	}
	note := ""
	if old.pid != 0 && old.pid != os.Getpid() {
		note = fmt.Sprintf("took over the lock %s of process %d, which is no longer running", path, old.pid)
	}
	rec := fmt.Sprintf("pid %d\nhost %s\nstarted %s\ncommand %s\n", os.Getpid(), host, time.Now().UTC().Format(time.RFC3339), strings.ReplaceAll(command, "\n", " "))
	if err := f.Truncate(0); err == nil {
		_, err = f.WriteAt([]byte(rec), 0)
		if err == nil {
			err = f.Sync()
		}
		if err != nil {
			f.Close()
			return nil, "", fmt.Errorf("taking lock %s: %w", path, err)
		}
	}
	l := &Lock{path: path, f: f, stop: make(chan struct{})}
	go l.beat()
	return l, note, nil
}

// sameOpen reports whether the open file f is the file st describes.
func sameOpen(f *os.File, st os.FileInfo) bool {
	fst, err := f.Stat()
	return err == nil && os.SameFile(fst, st)
}

// readLock parses the record of an open lock file (zero if empty or not a
// record).
func readLock(f *os.File) lockInfo {
	var li lockInfo
	buf := make([]byte, 4096)
	n, _ := f.ReadAt(buf, 0)
	if st, err := f.Stat(); err == nil {
		li.mtime = st.ModTime()
	}
	for _, line := range strings.Split(string(buf[:n]), "\n") {
		k, v, _ := strings.Cut(line, " ")
		switch k {
		case "pid":
			li.pid, _ = strconv.Atoi(v)
		case "host":
			li.host = v
		case "command":
			li.command = v
		}
	}
	return li
}

// gone reports whether the recorded holder has stopped: on this host, its
// process is not running; on another host, the lock has not been
// refreshed for StaleAfter.
func (li lockInfo) gone(host string) bool {
	if li.host == "" || li.host == host {
		return li.pid == os.Getpid() || !processAlive(li.pid)
	}
	return time.Since(li.mtime) > StaleAfter
}

// beat refreshes the lock's modification time every Heartbeat until
// Release.
func (l *Lock) beat() {
	t := time.NewTicker(Heartbeat)
	defer t.Stop()
	for {
		select {
		case <-l.stop:
			return
		case now := <-t.C:
			os.Chtimes(l.path, now, now)
		}
	}
}

// Path returns the lock file's name.
func (l *Lock) Path() string { return l.path }

// Release removes the lock file and unlocks it. It is safe to call more
// than once and on a nil Lock.
func (l *Lock) Release() {
	if l == nil {
		return
	}
	l.once.Do(func() {
		close(l.stop)
		os.Remove(l.path)
		l.f.Close()
	})
}
