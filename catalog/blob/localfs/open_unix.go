//go:build unix

package localfs

import (
	"io/fs"
	"os"

	"golang.org/x/sys/unix"
)

// openRead opens path for reading as a plain blocking file. os.Open would
// first try to register a regular file with the runtime's poller (two
// fcntl calls and an epoll_ctl that fails), which a download pays on
// every request; os.NewFile of the descriptor skips that.
func openRead(path string) (*os.File, error) {
	for {
		fd, err := unix.Open(path, unix.O_RDONLY|unix.O_CLOEXEC, 0)
		if err == unix.EINTR {
			continue
		}
		if err != nil {
			return nil, &fs.PathError{Op: "open", Path: path, Err: err}
		}
		return os.NewFile(uintptr(fd), path), nil
	}
}
