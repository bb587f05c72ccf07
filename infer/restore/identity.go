package restore

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"sort"
	"strings"

	"pdwave/model/net"
)

// Identity names everything a restoration's result depends on: the content
// of every input file (SHA-256, FIPS 180-4), the content of the weights and
// the settings that shape the result. Journals and parts record it
// (Identity.Key), and resume and merge refuse a mismatch, saying what
// differs (DiffKeys). File names are recorded for the messages but are not
// part of the identity: moved or renamed inputs with the same content
// still match.
type Identity struct {
	Files    []FileID          // input files in a fixed order of roles
	Weights  string            // "sha256:<hex>" of the weights' content, "none" without a network
	Settings map[string]string // settings shaping the result (no command line, no file names)
}

// FileID is one input file: its role ("burst", "defocused", "dark",
// "flat", "site"), its name as given and "sha256:<hex>" of its content.
type FileID struct{ Role, Name, Hash string }

// identityHeader is the first line of a key.
const identityHeader = "pdwave restore identity 1"

// Key returns the identity as text: a header line, then one line per file
// ("<role> <hash> <name>"), the weights ("weights <hash>") and every
// setting ("setting <name>=<value>") in name order.
func (id Identity) Key() string {
	var b strings.Builder
	b.WriteString(identityHeader + "\n")
	for _, f := range id.Files {
		fmt.Fprintf(&b, "%s %s %s\n", f.Role, f.Hash, f.Name)
	}
	w := id.Weights
	if w == "" {
		w = "none"
	}
	fmt.Fprintf(&b, "weights %s\n", w)
	keys := make([]string, 0, len(id.Settings))
	for k := range id.Settings {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		fmt.Fprintf(&b, "setting %s=%s\n", k, strings.ReplaceAll(id.Settings[k], "\n", " "))
	}
	return b.String()
}

// HashFile returns "sha256:<hex>" of the content of the file at path.
func HashFile(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("reading %s: %w", path, err)
	}
	return "sha256:" + hex.EncodeToString(h.Sum(nil)), nil
}

// HashWeights returns "sha256:<hex>" of the weight file m serialises to
// (net.Model.Write), the same whether the weights came from a file or
// were built in.
func HashWeights(m *net.Model) (string, error) {
	h := sha256.New()
	if err := m.Write(h); err != nil {
		return "", err
	}
	return "sha256:" + hex.EncodeToString(h.Sum(nil)), nil
}

// keyEntry is one line of a key: what it is about, its value and, for
// files, the name it was given.
type keyEntry struct{ value, name string }

// parseKey splits a key into its entries by what they are about ("burst",
// "weights", "setting patch", "range"); lines it does not know are kept
// whole.
func parseKey(key string) map[string]keyEntry {
	e := map[string]keyEntry{}
	for _, line := range strings.Split(strings.TrimSpace(key), "\n") {
		f := strings.SplitN(line, " ", 3)
		switch {
		case line == identityHeader || line == "":
		case f[0] == "setting" && len(f) >= 2:
			k, v, _ := strings.Cut(strings.TrimPrefix(line, "setting "), "=")
			e["setting "+k] = keyEntry{value: v}
		case len(f) == 3 && strings.HasPrefix(f[1], "sha256:"):
			e[f[0]] = keyEntry{value: f[1], name: f[2]}
		case len(f) >= 2:
			e[f[0]] = keyEntry{value: strings.TrimPrefix(line, f[0]+" ")}
		default:
			e[line] = keyEntry{value: line}
		}
	}
	return e
}

// DiffKeys compares two keys and returns "" if they name the same inputs,
// weights and settings, else what differs (at most three items, names
// included), with was and now naming the two sides (e.g. "in the journal",
// "now").
func DiffKeys(old, cur, was, now string) string {
	a, b := parseKey(old), parseKey(cur)
	names := map[string]bool{}
	for k := range a {
		names[k] = true
	}
	for k := range b {
		names[k] = true
	}
	sorted := make([]string, 0, len(names))
	for k := range names {
		sorted = append(sorted, k)
	}
	sort.Strings(sorted)
	var diffs []string
	for _, k := range sorted {
		x, inA := a[k]
		y, inB := b[k]
		switch {
		case inA && inB && x.value == y.value:
			continue
		case !inA:
			diffs = append(diffs, fmt.Sprintf("%s %s (absent %s)", describeEntry(k, y), now, was))
		case !inB:
			diffs = append(diffs, fmt.Sprintf("%s %s (absent %s)", describeEntry(k, x), was, now))
		default:
			diffs = append(diffs, fmt.Sprintf("%s differs: %s %s, %s %s", entryName(k), shortValue(x), was, shortValue(y), now))
		}
	}
	if len(diffs) > 3 {
		diffs = append(diffs[:3], fmt.Sprintf("and %d more", len(diffs)-3))
	}
	return strings.Join(diffs, "; ")
}

// entryName names a key entry in messages.
func entryName(k string) string {
	switch k {
	case "burst", "defocused", "dark", "flat", "site":
		return "the " + k + " file's content"
	case "weights":
		return "the weights' content"
	case "range":
		return "the share of patches"
	}
	return k
}

// describeEntry names an entry with its value.
func describeEntry(k string, e keyEntry) string { return entryName(k) + " " + shortValue(e) }

// shortValue shows a value, a hash cut to 12 hex digits after its file name.
func shortValue(e keyEntry) string {
	v := e.value
	if h, ok := strings.CutPrefix(v, "sha256:"); ok && len(h) > 12 {
		v = "sha256 " + h[:12] + "…"
	}
	if e.name != "" {
		return e.name + " (" + v + ")"
	}
	return v
}
