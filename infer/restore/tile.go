package restore

import (
	"errors"
	"fmt"
	"strconv"
	"strings"

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

// ShardArray is the --shard word that takes the shard from the job-array
// environment (ShardFromEnv). Sharding never comes from the environment
// unless asked for.
const ShardArray = "array"

// ParseShardFlag parses the value of --shard: "i/n" (ParseShard), or
// ShardArray, which reads the job array's variables through getenv and is
// an error when they are absent.
func ParseShardFlag(s string, getenv func(string) string) (Shard, error) {
	if s != ShardArray {
		return ParseShard(s)
	}
	sh, ok, err := ShardFromEnv(getenv)
	if err != nil {
		return Shard{}, err
	}
	if !ok {
		return Shard{}, errors.New("restore: --shard array: SLURM_ARRAY_TASK_ID is not set (not a job-array task); give --shard i/n")
	}
	return sh, nil
}

// ShardFromEnv reads a job-array shard from the scheduler variables
// through getenv: SLURM_ARRAY_TASK_ID, and SLURM_ARRAY_TASK_COUNT or
// SLURM_ARRAY_TASK_MAX, with SLURM_ARRAY_TASK_MIN (default 0) and
// SLURM_ARRAY_TASK_STEP (default 1): Index = (ID − MIN)/STEP, Count =
// COUNT, or (MAX − MIN)/STEP + 1 without COUNT. ok is false when ID is
// absent; malformed or inconsistent values give an error naming the
// variable.
func ShardFromEnv(getenv func(string) string) (sh Shard, ok bool, err error) {
	if getenv("SLURM_ARRAY_TASK_ID") == "" {
		return Shard{}, false, nil
	}
	num := func(name string, def int, need bool) (int, error) {
		v := getenv(name)
		if v == "" {
			if need {
				return 0, fmt.Errorf("restore: job array: %s is not set", name)
			}
			return def, nil
		}
		n, err := strconv.Atoi(strings.TrimSpace(v))
		if err != nil {
			return 0, fmt.Errorf("restore: %s=%q is not an integer", name, v)
		}
		return n, nil
	}
	i, err := num("SLURM_ARRAY_TASK_ID", 0, true)
	if err != nil {
		return Shard{}, false, err
	}
	m, err := num("SLURM_ARRAY_TASK_MIN", 0, false)
	if err != nil {
		return Shard{}, false, err
	}
	step, err := num("SLURM_ARRAY_TASK_STEP", 1, false)
	if err != nil || step < 1 {
		return Shard{}, false, fmt.Errorf("restore: SLURM_ARRAY_TASK_STEP=%q must be a positive integer", getenv("SLURM_ARRAY_TASK_STEP"))
	}
	n, err := num("SLURM_ARRAY_TASK_COUNT", 0, false)
	if err != nil {
		return Shard{}, false, err
	}
	if getenv("SLURM_ARRAY_TASK_COUNT") == "" {
		mx, err := num("SLURM_ARRAY_TASK_MAX", 0, true)
		if err != nil {
			return Shard{}, false, fmt.Errorf("%w (nor SLURM_ARRAY_TASK_COUNT)", err)
		}
		n = (mx-m)/step + 1
	}
	if n < 1 {
		return Shard{}, false, fmt.Errorf("restore: job array of %d tasks (need at least 1)", n)
	}
	if (i-m)%step != 0 {
		return Shard{}, false, fmt.Errorf("restore: job array task %d is not MIN %d plus a multiple of STEP %d", i, m, step)
	}
	sh = Shard{Index: (i - m) / step, Count: n}
	if err := sh.Validate(); err != nil {
		return Shard{}, false, fmt.Errorf("restore: job array task %d (min %d, step %d, %d tasks): %w", i, m, step, n, err)
	}
	return sh, true, nil
}

// PartPath returns the part file of shard sh of the output out:
// SidecarBase(out) + ".part-<i>-of-<n>.fits", i zero-padded to the width
// of n − 1, so that the parts of one output sort in shard order.
func PartPath(out string, sh Shard) string {
	w := len(strconv.Itoa(sh.Count - 1))
	return fmt.Sprintf("%s.part-%0*d-of-%d.fits", SidecarBase(out), w, sh.Index, sh.Count)
}

// PartGlob returns the pattern (filepath.Glob) matching the part files of
// every sharding of out.
func PartGlob(out string) string {
	r := strings.NewReplacer(`\`, `\\`, "*", `\*`, "?", `\?`, "[", `\[`)
	return r.Replace(SidecarBase(out)) + ".part-*-of-*.fits"
}
