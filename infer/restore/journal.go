package restore

import (
	"bufio"
	"encoding/gob"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"pdwave/internal/atomicfile"
)

// The journal is a sidecar directory holding
//
//	key        the identity of inputs, settings and shard (text)
//	NNNNNN.gob batches of finished patches, in increasing id order
//
// Every file is written to a temporary name and renamed, so a killed run
// leaves only complete batches. Because Run records patches in id order, the
// batches always hold a contiguous prefix of the shard's patches.

// patchJournal is the open journal of one shard: the batch being filled
// and the number of batch files written.
type patchJournal struct {
	dir       string
	batch     []*PatchResult
	batchSize int
	seq       int
}

// openPatchJournal opens the journal dir of the patches [lo, hi) under the
// identity key. With resume it continues a journal written under the same
// key (refusing another key, with what differs); otherwise, or when it
// holds no key yet, it refuses a journal holding finished patches, then
// writes the key. batchSize ≤ 0 means 16 patches per batch.
func openPatchJournal(dir, key string, resume bool, lo, hi, batchSize int) (*patchJournal, error) {
	if batchSize <= 0 {
		batchSize = 16
	}
	full := fmt.Sprintf("%s\nrange %d %d\n", key, lo, hi)
	j := &patchJournal{dir: dir, batchSize: batchSize}
	keyPath := filepath.Join(dir, "key")
	if resume {
		old, err := os.ReadFile(keyPath)
		if err == nil {
			if d := DiffKeys(string(old), full, "in the journal", "now"); d != "" {
				return nil, fmt.Errorf("restore: journal %s was written for other inputs or settings (%s); resume with the same inputs and settings, or remove the journal to start over", dir, d)
			}
			names, err := j.batches()
			if err != nil {
				return nil, err
			}
			j.seq = len(names)
			return j, nil
		}
		if !errors.Is(err, os.ErrNotExist) {
			return nil, fmt.Errorf("reading %s: %w", keyPath, err)
		}
	}
	// A fresh run never discards an earlier run's finished patches.
	names, err := j.batches()
	if err != nil {
		return nil, err
	}
	if len(names) > 0 {
		return nil, fmt.Errorf("restore: journal %s holds finished patches of an earlier run; add --resume to continue it, or remove the journal to start over", dir)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("creating journal %s: %w", dir, err)
	}
	if err := atomicfile.Write(keyPath, func(w io.Writer) error {
		_, err := io.WriteString(w, full)
		return err
	}); err != nil {
		return nil, err
	}
	return j, nil
}

// removeJournal removes the journal folder dir once its output is
// written: only the files the journal writes (key, batches and their
// temporaries); a folder holding anything else is left, with its other
// files.
func removeJournal(dir string) error {
	ents, err := os.ReadDir(dir)
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("removing journal %s: %w", dir, err)
	}
	for _, e := range ents {
		n := e.Name()
		if e.Type().IsRegular() && (n == "key" || journalBatch(n) || strings.HasPrefix(n, ".key.tmp-") || strings.HasPrefix(n, ".0")) {
			if err := os.Remove(filepath.Join(dir, n)); err != nil {
				return fmt.Errorf("removing journal %s: %w", dir, err)
			}
		}
	}
	os.Remove(dir) // fails, harmlessly, if something else is in it
	return nil
}

// journalBatch reports whether name is a batch file name (NNNNNN.gob).
func journalBatch(name string) bool {
	num, ok := strings.CutSuffix(name, ".gob")
	if !ok || len(num) != 6 {
		return false
	}
	for _, c := range num {
		if c < '0' || c > '9' {
			return false
		}
	}
	return true
}

// batches lists the batch files in order.
func (j *patchJournal) batches() ([]string, error) {
	ents, err := os.ReadDir(j.dir)
	if err != nil {
		if errors.Is(err, os.ErrNotExist) {
			return nil, nil
		}
		return nil, fmt.Errorf("reading journal %s: %w", j.dir, err)
	}
	var names []string
	for _, e := range ents {
		if journalBatch(e.Name()) {
			names = append(names, e.Name())
		}
	}
	sort.Strings(names)
	return names, nil
}

// replay feeds the recorded patches to fn in order.
func (j *patchJournal) replay(fn func(*PatchResult) error) error {
	names, err := j.batches()
	if err != nil {
		return err
	}
	for _, n := range names {
		path := filepath.Join(j.dir, n)
		f, err := os.Open(path)
		if err != nil {
			return fmt.Errorf("reading %s: %w", path, err)
		}
		var recs []*PatchResult
		err = gob.NewDecoder(bufio.NewReader(f)).Decode(&recs)
		f.Close()
		if err != nil {
			return fmt.Errorf("reading %s: %w", path, err)
		}
		for _, r := range recs {
			if err := fn(r); err != nil {
				return err
			}
		}
	}
	return nil
}

// add records r, writing a batch file when the batch is full.
func (j *patchJournal) add(r *PatchResult) error {
	j.batch = append(j.batch, r)
	if len(j.batch) >= j.batchSize {
		return j.flush()
	}
	return nil
}

// flush writes the batch being filled, if any, as the next batch file.
func (j *patchJournal) flush() error {
	if len(j.batch) == 0 {
		return nil
	}
	path := filepath.Join(j.dir, fmt.Sprintf("%06d.gob", j.seq))
	if err := atomicfile.Write(path, func(w io.Writer) error {
		return gob.NewEncoder(w).Encode(j.batch)
	}); err != nil {
		return err
	}
	j.seq++
	j.batch = j.batch[:0]
	return nil
}
