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

type restoreJournal struct {
	dir       string
	batch     []*PatchResult
	batchSize int
	seq       int
}

func restoreOpenJournal(dir, key string, resume bool, lo, hi, batchSize int) (*restoreJournal, error) {
	if batchSize <= 0 {
		batchSize = 16
	}
	full := fmt.Sprintf("%s\nrange %d %d\n", key, lo, hi)
	j := &restoreJournal{dir: dir, batchSize: batchSize}
	keyPath := filepath.Join(dir, "key")
	if resume {
		old, err := os.ReadFile(keyPath)
		if err == nil {
			if string(old) != full {
				return nil, fmt.Errorf("restore: journal %s was written for other inputs or settings; remove it or run without --resume", dir)
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
	// Fresh journal: clear old batches.
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("creating journal %s: %w", dir, err)
	}
	names, err := j.batches()
	if err != nil {
		return nil, err
	}
	for _, n := range names {
		if err := os.Remove(filepath.Join(dir, n)); err != nil {
			return nil, fmt.Errorf("clearing journal: %w", err)
		}
	}
	if err := restoreWriteAtomic(keyPath, func(w io.Writer) error {
		_, err := io.WriteString(w, full)
		return err
	}); err != nil {
		return nil, err
	}
	return j, nil
}

// batches lists the batch files in order.
func (j *restoreJournal) batches() ([]string, error) {
	ents, err := os.ReadDir(j.dir)
	if err != nil {
		if errors.Is(err, os.ErrNotExist) {
			return nil, nil
		}
		return nil, fmt.Errorf("reading journal %s: %w", j.dir, err)
	}
	var names []string
	for _, e := range ents {
		if strings.HasSuffix(e.Name(), ".gob") && !strings.HasPrefix(e.Name(), ".") {
			names = append(names, e.Name())
		}
	}
	sort.Strings(names)
	return names, nil
}

// replay feeds the recorded patches to fn in order.
func (j *restoreJournal) replay(fn func(*PatchResult) error) error {
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

func (j *restoreJournal) add(r *PatchResult) error {
	j.batch = append(j.batch, r)
	if len(j.batch) >= j.batchSize {
		return j.flush()
	}
	return nil
}

func (j *restoreJournal) flush() error {
	if len(j.batch) == 0 {
		return nil
	}
	path := filepath.Join(j.dir, fmt.Sprintf("%06d.gob", j.seq))
	if err := restoreWriteAtomic(path, func(w io.Writer) error {
		return gob.NewEncoder(w).Encode(j.batch)
	}); err != nil {
		return err
	}
	j.seq++
	j.batch = j.batch[:0]
	return nil
}

// restoreWriteAtomic writes path through fn with atomicfile.Write (a
// temporary file in the same directory, synced and renamed into place);
// errors name the path.
func restoreWriteAtomic(path string, fn func(io.Writer) error) error {
	return atomicfile.Write(path, fn)
}
