//go:build !unix

package localfs

import "os"

// openRead opens path for reading.
func openRead(path string) (*os.File, error) { return os.Open(path) }
