package outpath

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"pdwave/internal/atomicfile"
)

// ManifestName is the file, inside a folder pdwave writes as a whole,
// that lists every file and folder pdwave put there.
const ManifestName = ".pdwave-files"

// manifestHeader is the first line of a manifest.
const manifestHeader = "# pdwave output folder: everything below was written by pdwave"

// maxManifest bounds the entries read from a manifest.
const maxManifest = 1 << 20

// WriteManifest lists every file and folder under dir (slash-separated
// paths relative to dir, sorted; sub-folders' manifests included) in
// dir/ManifestName, written atomically.
func WriteManifest(dir string) error {
	var names []string
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, err := filepath.Rel(dir, p)
		if err != nil || rel == "." || rel == ManifestName {
			return err
		}
		names = append(names, filepath.ToSlash(rel))
		return nil
	})
	if err != nil {
		return fmt.Errorf("listing %s: %w", dir, err)
	}
	sort.Strings(names)
	return atomicfile.Write(filepath.Join(dir, ManifestName), func(w io.Writer) error {
		if _, err := fmt.Fprintln(w, manifestHeader); err != nil {
			return err
		}
		for _, n := range names {
			if _, err := fmt.Fprintln(w, n); err != nil {
				return err
			}
		}
		return nil
	})
}

// readManifest returns the entries of dir's manifest; ok is false if dir
// has none.
func readManifest(dir string) (map[string]bool, bool, error) {
	f, err := os.Open(filepath.Join(dir, ManifestName))
	if errors.Is(err, os.ErrNotExist) {
		return nil, false, nil
	}
	if err != nil {
		return nil, false, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	if !sc.Scan() || sc.Text() != manifestHeader {
		return nil, false, nil
	}
	names := map[string]bool{}
	for sc.Scan() {
		if len(names) >= maxManifest {
			return nil, false, fmt.Errorf("%s lists more than %d entries", filepath.Join(dir, ManifestName), maxManifest)
		}
		names[strings.TrimSpace(sc.Text())] = true
	}
	return names, true, sc.Err()
}

// Replaceable returns nil if the folder dir may be replaced as a whole by
// the command cmd: it does not exist, it is empty, or every file and
// folder in it is listed in its manifest (pdwave wrote them all). Anything
// else is an error naming dir and, where there is one, a file pdwave did
// not write.
func Replaceable(cmd, dir string) error {
	st, err := os.Stat(dir)
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	if !st.IsDir() {
		return fmt.Errorf("%s: output folder %s exists and is %s, not a folder", cmd, dir, describe(st))
	}
	ents, err := os.ReadDir(dir)
	if err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	if len(ents) == 0 {
		return nil
	}
	names, ok, err := readManifest(dir)
	if err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	if !ok {
		return fmt.Errorf("%s: %s is a folder pdwave did not write (it has no %s) and is not empty; give a new or empty folder", cmd, dir, ManifestName)
	}
	return filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return fmt.Errorf("%s: %w", cmd, err)
		}
		rel, _ := filepath.Rel(dir, p)
		if rel == "." || rel == ManifestName {
			return nil
		}
		if !names[filepath.ToSlash(rel)] {
			return fmt.Errorf("%s: %s holds %s, which pdwave did not write; move it away or give another folder", cmd, dir, rel)
		}
		return nil
	})
}
