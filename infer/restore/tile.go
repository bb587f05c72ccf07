package restore

import (
	"fmt"
	"pdwave/infer"
)

// Grid is the tiling of a field into overlapping patches (infer.Grid): one
// tiling shared by restore and compare, so that both judge the same patches.
type Grid = infer.Grid

// NewGrid is infer.NewGrid.
func NewGrid(nx, ny, patch, overlap int) (*Grid, error) { return infer.NewGrid(nx, ny, patch, overlap) }

// Shard selects a deterministic subset of patches: shard Index of Count takes
// the contiguous id range [Index·P/Count, (Index+1)·P/Count) of P patches.
// The zero value (Count 0) and Count 1 both mean all patches.
type Shard struct {
	Index, Count int // 0 ≤ Index < Count
}

// Range returns the half-open id range [lo, hi) of the shard among total
// patches.
func (s Shard) Range(total int) (lo, hi int) {
	if s.Count <= 1 {
		return 0, total
	}
	return s.Index * total / s.Count, (s.Index + 1) * total / s.Count
}

// Partial reports whether the shard covers only part of the patches.
func (s Shard) Partial() bool { return s.Count > 1 }

// String formats the shard as "i/n".
func (s Shard) String() string {
	if s.Count <= 1 {
		return "0/1"
	}
	return fmt.Sprintf("%d/%d", s.Index, s.Count)
}

// Validate returns an error unless 0 ≤ Index < Count (or Count ≤ 1 and
// Index == 0).
func (s Shard) Validate() error {
	if s.Count < 0 || s.Index < 0 || (s.Count <= 1 && s.Index != 0) || (s.Count > 1 && s.Index >= s.Count) {
		return fmt.Errorf("restore: invalid shard %d/%d (need 0 ≤ i < n)", s.Index, s.Count)
	}
	return nil
}

// ParseShard parses "i/n" with 0 ≤ i < n.
func ParseShard(s string) (Shard, error) {
	var sh Shard
	var rest string
	n, err := fmt.Sscanf(s, "%d/%d%s", &sh.Index, &sh.Count, &rest)
	if n < 2 || (err != nil && n != 2) || rest != "" {
		return Shard{}, fmt.Errorf("restore: shard %q: want i/n, e.g. 0/4", s)
	}
	if sh.Count < 1 {
		return Shard{}, fmt.Errorf("restore: shard %q: n must be at least 1", s)
	}
	if err := sh.Validate(); err != nil {
		return Shard{}, err
	}
	return sh, nil
}

// ShardFromEnv reads a job-array shard from the scheduler variables
// SLURM_ARRAY_TASK_ID, SLURM_ARRAY_TASK_COUNT and (optionally, default 0)
// SLURM_ARRAY_TASK_MIN through getenv: Index = ID − MIN, Count = COUNT. ok is
// false when the variables are absent; malformed or inconsistent values give
// an error.
func ShardFromEnv(getenv func(string) string) (sh Shard, ok bool, err error) {
	id, count, min := getenv("SLURM_ARRAY_TASK_ID"), getenv("SLURM_ARRAY_TASK_COUNT"), getenv("SLURM_ARRAY_TASK_MIN")
	if id == "" || count == "" {
		return Shard{}, false, nil
	}
	var i, n, m int
	if _, err := fmt.Sscan(id, &i); err != nil {
		return Shard{}, false, fmt.Errorf("restore: SLURM_ARRAY_TASK_ID=%q: %w", id, err)
	}
	if _, err := fmt.Sscan(count, &n); err != nil {
		return Shard{}, false, fmt.Errorf("restore: SLURM_ARRAY_TASK_COUNT=%q: %w", count, err)
	}
	if min != "" {
		if _, err := fmt.Sscan(min, &m); err != nil {
			return Shard{}, false, fmt.Errorf("restore: SLURM_ARRAY_TASK_MIN=%q: %w", min, err)
		}
	}
	sh = Shard{Index: i - m, Count: n}
	if n < 1 {
		return Shard{}, false, fmt.Errorf("restore: SLURM_ARRAY_TASK_COUNT=%d must be at least 1", n)
	}
	if err := sh.Validate(); err != nil {
		return Shard{}, false, fmt.Errorf("restore: job array task %d (min %d, count %d): %w", i, m, n, err)
	}
	return sh, true, nil
}
