// Package progress decides how a long command reports its progress: a line
// rewritten in place when standard error is a terminal, otherwise plain
// timestamped lines through log/slog that a log file or a batch system's
// output keeps readable.
package progress

import (
	"bytes"
	"io"
	"log/slog"
	"os"
	"strings"
	"sync"
)

// IsTerminal reports whether f is a terminal (a character device that
// answers the terminal control request; /dev/null is not one).
func IsTerminal(f *os.File) bool { return isTerminal(f) }

// Lines returns a writer that logs every line written to it as one slog
// record at level Info through l (a text handler prints "time=… level=INFO
// msg=…"). Text before a carriage return is a superseded update and is
// dropped; an unfinished line waits for its newline. The writer is safe
// for concurrent use.
func Lines(l *slog.Logger) io.Writer { return &lineWriter{l: l} }

type lineWriter struct {
	mu  sync.Mutex
	l   *slog.Logger
	buf []byte
}

// Write logs the complete lines of p (io.Writer).
func (w *lineWriter) Write(p []byte) (int, error) {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.buf = append(w.buf, p...)
	for {
		i := bytes.IndexByte(w.buf, '\n')
		if i < 0 {
			break
		}
		line := string(w.buf[:i])
		w.buf = w.buf[i+1:]
		if j := strings.LastIndexByte(line, '\r'); j >= 0 {
			line = line[j+1:]
		}
		if line = strings.TrimSpace(line); line != "" {
			w.l.Info(line)
		}
	}
	if j := bytes.LastIndexByte(w.buf, '\r'); j >= 0 {
		w.buf = w.buf[j+1:]
	}
	return len(p), nil
}

// Stderr returns where a command's progress goes and whether it may
// rewrite its line in place: os.Stderr itself on a terminal, else a Lines
// writer over a slog text handler on os.Stderr.
func Stderr() (w io.Writer, terminal bool) {
	if IsTerminal(os.Stderr) {
		return os.Stderr, true
	}
	return Lines(slog.New(slog.NewTextHandler(os.Stderr, nil))), false
}
