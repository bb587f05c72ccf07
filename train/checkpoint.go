package train

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"pdwave/internal/atomicfile"
	"pdwave/model/net"
)

// Checkpoint file names inside a run directory.
const (
	CheckpointWeights = "checkpoint.safetensors"
	CheckpointState   = "checkpoint.json"
)

// checkpointState is everything besides the weights that a resumed run needs
// to continue exactly: the data stream position is the step count, since
// burst i of the source is fixed by i.
type checkpointState struct {
	Format  string
	Step    int
	Config  Config
	Setup   Setup
	Adam    adamState
	History []StepStats
	Vals    []Validation
	Seconds float64 // wall time spent so far
}

const checkpointFormat = "pdwave-train-checkpoint-1"

// SaveCheckpoint writes the weights and the optimiser state to dir (created
// if needed) as one atomicfile.Set: both files are replaced together or
// not at all. history, vals and seconds are carried for the loss curve and
// the ETA.
func (t *Trainer) SaveCheckpoint(dir string, history []StepStats, vals []Validation, seconds float64) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("train: checkpoint folder: %w", err)
	}
	st := checkpointState{Format: checkpointFormat, Step: t.step, Config: t.cfg, Setup: t.prob.setup,
		Adam: t.adam, History: history, Vals: vals, Seconds: seconds}
	data, err := json.Marshal(st)
	if err != nil {
		return fmt.Errorf("train: encoding checkpoint: %w", err)
	}
	// The state file is renamed last: a state file always has its weights.
	set := atomicfile.NewSet()
	if err := set.Add(filepath.Join(dir, CheckpointWeights), t.model.Write); err != nil {
		set.Abort()
		return err
	}
	if err := set.Add(filepath.Join(dir, CheckpointState), bytesTo(data)); err != nil {
		set.Abort()
		return err
	}
	return set.Commit()
}

// bytesTo returns a writer function for atomicfile that writes data.
func bytesTo(data []byte) func(io.Writer) error {
	return func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	}
}

// Resumed is a trainer restored from a checkpoint with the run's record.
type Resumed struct {
	*Trainer
	History []StepStats
	Vals    []Validation
	Seconds float64
}

// Resume restores the run checkpointed in dir. workers > 0 overrides the
// worker count (results do not depend on it).
func Resume(dir string, src Source, workers int) (*Resumed, error) {
	data, err := os.ReadFile(filepath.Join(dir, CheckpointState))
	if err != nil {
		return nil, fmt.Errorf("train: resuming: %w", err)
	}
	var st checkpointState
	if err := json.Unmarshal(data, &st); err != nil {
		return nil, fmt.Errorf("train: reading %s: %w", filepath.Join(dir, CheckpointState), err)
	}
	if st.Format != checkpointFormat {
		return nil, fmt.Errorf("train: %s is not a checkpoint of this version (%q)", filepath.Join(dir, CheckpointState), st.Format)
	}
	if st.Setup, err = upgradeSetup(st.Setup, data); err != nil {
		return nil, fmt.Errorf("train: reading %s: %w", filepath.Join(dir, CheckpointState), err)
	}
	model, err := net.Load(filepath.Join(dir, CheckpointWeights))
	if err != nil {
		return nil, fmt.Errorf("train: resuming: %w", err)
	}
	if workers > 0 {
		st.Config.Workers = workers
	}
	if st.Config.Gamma == 0 {
		st.Config.Gamma = 1e-6 // checkpoints from before the setting
	}
	prob, err := newProblem(st.Setup, st.Config.PriorWeight, st.Config.Gamma)
	if err != nil {
		return nil, err
	}
	t, err := newTrainer(prob, st.Config, model, src)
	if err != nil {
		return nil, err
	}
	if len(st.Adam.M) != len(model.Params) || len(st.Adam.V) != len(model.Params) {
		return nil, fmt.Errorf("train: checkpoint optimiser state has %d tensors, the model %d", len(st.Adam.M), len(model.Params))
	}
	for i, p := range model.Params {
		if len(st.Adam.M[i]) != len(p.Data) || len(st.Adam.V[i]) != len(p.Data) {
			return nil, fmt.Errorf("train: checkpoint optimiser state of %s has the wrong size", p.Name)
		}
	}
	t.adam = st.Adam
	t.step = st.Step
	return &Resumed{Trainer: t, History: st.History, Vals: st.Vals, Seconds: st.Seconds}, nil
}
