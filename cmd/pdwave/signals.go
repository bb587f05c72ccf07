package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"sync"
	"syscall"
)

// interrupt catches SIGINT and SIGTERM for a long command: the first
// cancels its context, so the command finishes what is in flight, saves
// what is done and exits with a line saying how to resume; a second one
// ends the process at once (the default action is restored).
type interrupt struct {
	mu  sync.Mutex
	sig os.Signal
}

// catchInterrupts starts catching SIGINT and SIGTERM for the command what
// (a note goes to log when one arrives) and returns the context they
// cancel, the interrupt record and the function that stops catching.
func catchInterrupts(log io.Writer, what string) (context.Context, *interrupt, func()) {
	ctx, cancel := context.WithCancel(context.Background())
	ch := make(chan os.Signal, 1)
	signal.Notify(ch, os.Interrupt, syscall.SIGTERM)
	in := &interrupt{}
	done := make(chan struct{})
	go func() {
		select {
		case s := <-ch:
			signal.Stop(ch)
			in.mu.Lock()
			in.sig = s
			in.mu.Unlock()
			fmt.Fprintf(log, "%s: %s received: finishing the work in flight and saving what is done (send it again to quit at once)\n", what, signalName(s))
			cancel()
		case <-done:
		}
	}()
	var once sync.Once
	return ctx, in, func() {
		once.Do(func() {
			signal.Stop(ch)
			close(done)
			cancel()
		})
	}
}

// received returns the signal caught, or nil.
func (in *interrupt) received() os.Signal {
	in.mu.Lock()
	defer in.mu.Unlock()
	return in.sig
}

// stopped turns the error of a command stopped by sig into the error the
// process ends with: err's message, then how to resume, with exit status
// 128 + the signal number (the shell's convention).
func stopped(sig os.Signal, err error) error {
	code := 1
	if s, ok := sig.(syscall.Signal); ok {
		code = 128 + int(s)
	}
	return &exitError{msg: fmt.Sprintf("%v; stopped by %s; resume with: %s", err, signalName(sig), resumeCommand(os.Args[1:])), code: code}
}

// signalName names the signals caught as a shell's kill -l does.
func signalName(sig os.Signal) string {
	switch sig {
	case os.Interrupt:
		return "SIGINT"
	case syscall.SIGTERM:
		return "SIGTERM"
	}
	return sig.String()
}

// exitError is an error with its own exit status.
type exitError struct {
	msg  string
	code int
}

// Error returns the message.
func (e *exitError) Error() string { return e.msg }

// ExitCode returns the exit status.
func (e *exitError) ExitCode() int { return e.code }

// resumeCommand returns the command line that continues a stopped run:
// "pdwave" and args without the flags the checkpoint fixes
// (fixedByCheckpoint), with --resume added unless it is there, each argument
// quoted for a POSIX shell where it needs it.
func resumeCommand(args []string) string {
	parts := []string{"pdwave"}
	has := false
	for i := 0; i < len(args); i++ {
		a := args[i]
		if fixedByCheckpoint[a] {
			i++ // the flag's value follows
			continue
		}
		if k, _, ok := strings.Cut(a, "="); ok && fixedByCheckpoint[k] {
			continue
		}
		has = has || a == "--resume" || a == "--resume=true"
		parts = append(parts, shellQuote(a))
	}
	if !has {
		parts = append(parts, "--resume")
	}
	return strings.Join(parts, " ")
}

// fixedByCheckpoint are the flags a resumed run takes from its checkpoint
// (the network and its starting weights); the printed command leaves them
// out (the resumed run takes them from the checkpoint).
var fixedByCheckpoint = map[string]bool{"--init": true, "--conv": true, "--hidden": true, "--head": true}

// shellQuote returns s as one word of a POSIX shell command (single quotes
// where needed, IEEE Std 1003.1-2017 §2.2.3).
func shellQuote(s string) string {
	if s != "" && strings.Trim(s, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_./=:,+@%") == "" {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}
