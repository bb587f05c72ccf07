// Package outpath checks, before a command does any work, that what it is
// about to write can neither overwrite what it reads nor destroy what
// pdwave did not write.
//
// A Plan collects a command's inputs (files or folders it reads) and
// outputs (files or folders it writes), then Err reports the first
// problem:
//
//   - an output that is an input, under any spelling: relative or absolute,
//     through symbolic links (filepath.EvalSymlinks), or another name of
//     the same file (os.SameFile: hard links, bind mounts);
//   - an output file that exists and is not a regular file (a folder, a
//     device such as /dev/null, a pipe), or an output folder that exists
//     and is not a folder;
//   - an output folder that holds an input (it could be cleared or its
//     files replaced);
//   - two outputs that resolve to one file (two inputs with the same base
//     name restored into one folder).
//
// An output that does not exist yet is resolved through its nearest
// existing parent, so "out/../in.fits" and a symbolic link to the input's
// folder are seen for what they are. Inputs that do not exist are left to
// the reader, which names them.
//
// Folders that pdwave replaces as a whole (demo, compare) carry a manifest,
// ManifestName, listing every file pdwave wrote there; Replaceable refuses
// a non-empty folder without one, or with a file not listed in it.
package outpath

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
)

// Plan is the set of inputs and outputs of one command. The zero value is
// not usable; call New. A Plan is not safe for concurrent use.
type Plan struct {
	cmd    string
	inputs []entry
	outs   []entry
	err    error
}

// entry is one path as spelled, its resolved absolute form and, if it
// exists, its file information (following links).
type entry struct {
	spelled, resolved string
	info              os.FileInfo // nil if it does not exist
}

// New returns an empty plan for the command cmd (used as the prefix of the
// error messages, e.g. "restore").
func New(cmd string) *Plan { return &Plan{cmd: cmd} }

// Input adds files or folders the command reads. Empty names are skipped.
func (p *Plan) Input(paths ...string) *Plan {
	for _, path := range paths {
		if path == "" || p.err != nil {
			continue
		}
		e, err := resolve(path)
		if err != nil {
			p.err = fmt.Errorf("%s: %w", p.cmd, err)
			return p
		}
		p.inputs = append(p.inputs, e)
	}
	return p
}

// output resolves an output path; ok is false when there is nothing to
// check (an empty path, or the plan has already failed, now included).
func (p *Plan) output(path string) (e entry, ok bool) {
	if path == "" || p.err != nil {
		return e, false
	}
	e, err := resolve(path)
	if err != nil {
		p.err = fmt.Errorf("%s: %w", p.cmd, err)
		return e, false
	}
	return e, true
}

// File adds an output file: it must not be an input, not be a folder, a
// device or anything but a regular file if it exists, and not be another
// output of the plan.
func (p *Plan) File(path string) *Plan {
	e, ok := p.output(path)
	if !ok {
		return p
	}
	if e.info != nil && !e.info.Mode().IsRegular() {
		p.err = fmt.Errorf("%s: output %s exists and is %s, not a regular file; give a file name", p.cmd, path, describe(e.info))
		return p
	}
	p.add(e, path)
	return p
}

// Dir adds an output folder: it must not be an input, not be anything but
// a folder if it exists, hold no input, and not be another output.
func (p *Plan) Dir(path string) *Plan {
	e, ok := p.output(path)
	if !ok {
		return p
	}
	if e.info != nil && !e.info.IsDir() {
		p.err = fmt.Errorf("%s: output folder %s exists and is %s, not a folder", p.cmd, path, describe(e.info))
		return p
	}
	for _, in := range p.inputs {
		if within(in.resolved, e.resolved) {
			p.err = fmt.Errorf("%s: output folder %s holds the input %s; give a folder apart from the inputs", p.cmd, path, in.spelled)
			return p
		}
	}
	p.add(e, path)
	return p
}

// add checks e against the inputs and the outputs so far and records it.
func (p *Plan) add(e entry, path string) {
	for _, in := range p.inputs {
		if same(e, in) {
			p.err = fmt.Errorf("%s: output %s is the input %s; give another output name", p.cmd, path, in.spelled)
			return
		}
	}
	for _, o := range p.outs {
		if same(e, o) {
			p.err = fmt.Errorf("%s: two outputs would be written to %s (also as %s); give inputs distinct names or separate outputs", p.cmd, path, o.spelled)
			return
		}
	}
	p.outs = append(p.outs, e)
}

// Err returns the first problem found, or nil.
func (p *Plan) Err() error { return p.err }

// SameFile reports whether the paths a and b name one file or folder
// (resolved as for a Plan; paths that do not exist compare by their
// resolved names).
func SameFile(a, b string) bool {
	ea, err1 := resolve(a)
	eb, err2 := resolve(b)
	return err1 == nil && err2 == nil && same(ea, eb)
}

// same reports whether two entries name one file.
func same(a, b entry) bool {
	if a.resolved == b.resolved {
		return true
	}
	return a.info != nil && b.info != nil && os.SameFile(a.info, b.info)
}

// within reports whether the resolved path p lies inside the folder dir.
func within(p, dir string) bool {
	rel, err := filepath.Rel(dir, p)
	return err == nil && rel != "." && rel != ".." && !strings.HasPrefix(rel, ".."+string(filepath.Separator))
}

// resolve returns the absolute, link-free form of path and its file
// information if it exists. A path that does not exist is resolved through
// its nearest existing parent. A dangling link resolves to its target.
func resolve(path string) (entry, error) {
	abs, err := filepath.Abs(path)
	if err != nil {
		return entry{}, fmt.Errorf("%s: %w", path, err)
	}
	r, err := evalMissing(abs, 0)
	if err != nil {
		return entry{}, fmt.Errorf("%s: %w", path, err)
	}
	e := entry{spelled: path, resolved: r}
	if st, err := os.Stat(r); err == nil {
		e.info = st
	} else if !errors.Is(err, os.ErrNotExist) {
		return entry{}, fmt.Errorf("%s: %w", path, err)
	}
	return e, nil
}

// evalMissing resolves the links of the absolute path abs, whose last
// elements may not exist yet (nor a dangling link's target).
func evalMissing(abs string, depth int) (string, error) {
	if depth > 64 {
		return "", errors.New("too many levels of symbolic links")
	}
	r, err := filepath.EvalSymlinks(abs)
	if err == nil {
		return r, nil
	}
	if !errors.Is(err, os.ErrNotExist) {
		return "", err
	}
	if st, lerr := os.Lstat(abs); lerr == nil && st.Mode()&os.ModeSymlink != 0 {
		// A dangling link: writing to it writes its target.
		t, err := os.Readlink(abs)
		if err != nil {
			return "", err
		}
		if !filepath.IsAbs(t) {
			t = filepath.Join(filepath.Dir(abs), t)
		}
		return evalMissing(t, depth+1)
	}
	dir, base := filepath.Split(abs)
	dir = filepath.Clean(dir)
	if dir == abs {
		return abs, nil
	}
	pr, err := evalMissing(dir, depth+1)
	if err != nil {
		return "", err
	}
	return filepath.Join(pr, base), nil
}

// describe names the kind of a file that is not a regular file.
func describe(st os.FileInfo) string {
	m := st.Mode()
	switch {
	case m.IsDir():
		return "a folder"
	case m&os.ModeDevice != 0 || m&os.ModeCharDevice != 0:
		return "a device"
	case m&os.ModeNamedPipe != 0:
		return "a named pipe"
	case m&os.ModeSocket != 0:
		return "a socket"
	case m.IsRegular():
		return "a file"
	}
	return "not a regular file"
}
