package burst

import (
	"bufio"
	"io"
	"os"
	"path/filepath"
)

// WriteAtomic writes the file path through write, so that path is either
// left as it was or replaced by the complete new file: write fills a
// buffered temporary file ".<name>.tmp-*" in the same folder, which is then
// flushed, made readable (mode 0644), synced, closed and renamed over path;
// the folder is synced as well (best effort). On any error the temporary
// file is removed. Errors are returned as they come: callers add the path.
// Every product of pdwave (FITS, CSV, JSON, PNG, journals) is written
// through it.
func WriteAtomic(path string, write func(io.Writer) error) (err error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	f, err := os.CreateTemp(dir, "."+base+".tmp-*")
	if err != nil {
		return err
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(tmp)
		}
	}()
	w := bufio.NewWriterSize(f, 1<<16)
	if err = write(w); err != nil {
		return err
	}
	if err = w.Flush(); err != nil {
		return err
	}
	if err = f.Chmod(0o644); err != nil {
		return err
	}
	if err = f.Sync(); err != nil {
		return err
	}
	if err = f.Close(); err != nil {
		return err
	}
	if err = os.Rename(tmp, path); err != nil {
		return err
	}
	if d, e := os.Open(dir); e == nil {
		d.Sync() // best effort: make the rename durable
		d.Close()
	}
	return nil
}
