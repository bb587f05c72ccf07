//go:build !unix

package atomicfile

import "os"

// umask is 0 where the system has none.
func umask() os.FileMode { return 0 }
