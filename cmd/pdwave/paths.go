package main

import (
	"os"
	"strings"

	"pdwave/infer"
	"pdwave/internal/outpath"
)

// The output checks of every command, run before any work (see
// internal/outpath): an output may not be an input under any spelling,
// must be a regular file (or a folder where a folder goes), and an output
// folder may not hold an input.

// checkFiles checks the output files outs of command cmd against its
// inputs.
func checkFiles(cmd string, outs []string, inputs ...string) error {
	p := outpath.New(cmd).Input(inputs...)
	for _, o := range outs {
		p.File(o)
	}
	return p.Err()
}

// checkDir checks the output folder out of command cmd against its
// inputs.
func checkDir(cmd, out string, inputs ...string) error {
	return outpath.New(cmd).Input(inputs...).Dir(out).Err()
}

// checkReplaceDir checks a folder that cmd replaces as a whole (compare,
// demo): checkDir, and it must be new, empty or written entirely by
// pdwave (outpath.Replaceable).
func checkReplaceDir(cmd, out string, inputs ...string) error {
	if err := checkDir(cmd, out, inputs...); err != nil {
		return err
	}
	return outpath.Replaceable(cmd, out)
}

// productFiles returns a FITS product and the CSV written beside it.
func productFiles(out string) []string { return []string{out, infer.CSVPath(out)} }

// sceneInputs returns the files and folders named in a --scene list (the
// words granulation, real and mix name none).
func sceneInputs(spec string) []string {
	var p []string
	for _, s := range strings.Split(spec, ",") {
		s = strings.TrimSpace(s)
		if _, err := os.Stat(s); s != "" && err == nil {
			p = append(p, s)
		}
	}
	return p
}
