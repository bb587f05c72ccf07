// Package provenance records what made an output: the command line as a
// shell would read it back and the SHA-256 (FIPS 180-4) of every input
// file, as settings every writer already records (FITS HISTORY cards,
// "# key: value" CSV lines, JSON reports).
package provenance

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"strings"
)

// CommandLine returns args (os.Args: the program, then its arguments) as
// one POSIX shell command: each word single-quoted where it holds anything
// but letters, digits and -_./=:,+@% (IEEE Std 1003.1-2017 §2.2.3), so
// pasting it into a shell runs the same command. The program is written
// as its base name.
func CommandLine(args []string) string {
	if len(args) == 0 {
		return ""
	}
	words := []string{quote(baseName(args[0]))}
	for _, a := range args[1:] {
		words = append(words, quote(a))
	}
	return strings.Join(words, " ")
}

func baseName(p string) string { return p[strings.LastIndexByte(p, '/')+1:] }

// quote returns s as one shell word.
func quote(s string) string {
	if s != "" && strings.Trim(s, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_./=:,+@%") == "" {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}

// Input is one input file of a run: its role ("burst", "site",
// "weights", ...) and its path; the empty path names no file (skipped).
type Input struct{ Role, Path string }

// Settings returns the provenance settings of a run: "command line" =
// CommandLine(args), and "sha256 <role>" = the hexadecimal SHA-256 of each
// input file's content (several files of one role, such as the parts of a
// '+'-joined burst, are given as several Inputs and joined with '+'). It
// reads each file once; errors name the path.
func Settings(args []string, inputs ...Input) (map[string]string, error) {
	s := map[string]string{"command line": CommandLine(args)}
	for _, in := range inputs {
		if in.Path == "" {
			continue
		}
		h, err := HashFile(in.Path)
		if err != nil {
			return nil, err
		}
		k := "sha256 " + in.Role
		if s[k] != "" {
			h = s[k] + "+" + h
		}
		s[k] = h
	}
	return s, nil
}

// HashFile returns the hexadecimal SHA-256 of the content of the file at
// path.
func HashFile(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("hashing %s: %w", path, err)
	}
	defer f.Close()
	return Hash(func(w io.Writer) error {
		_, err := io.Copy(w, f)
		return err
	})
}

// Hash returns the hexadecimal SHA-256 of what write writes (built-in
// weights, which have no file, are hashed as the file they serialise to).
func Hash(write func(io.Writer) error) (string, error) {
	h := sha256.New()
	if err := write(h); err != nil {
		return "", fmt.Errorf("hashing: %w", err)
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}
