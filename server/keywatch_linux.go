package server

import (
	"errors"
	"path/filepath"
	"unsafe"

	"golang.org/x/sys/unix"
)

// keyWatch tells whether the key file may have changed since it was last
// asked, by an inotify watch on the file's folder: a non-blocking read of
// the watch's queue, which the kernel fills within the call that renames,
// writes or removes the file, so a change the command line has finished
// is seen by the next request (as a stat of the file would, at a fraction
// of its cost on every request). Any event of the folder counts, not only
// those naming the file: a mounted secret's files are symbolic links
// through a link its update renames, and the folder's other files are
// written in place (the catalog, the audit journal), which it does not
// ask for. A key file that is itself a symbolic link is not watched
// (Authority.keySet): its target's folder is elsewhere.
type keyWatch struct {
	fd  int
	buf [4096]byte
}

// keyWatchMask: the ways a file's content can change under its name in a
// folder (KeySet.Save renames a finished file over it; an editor may
// write it in place and close it). Writes to files that stay open (the
// catalog, the audit journal) are not asked for.
const keyWatchMask = unix.IN_CLOSE_WRITE | unix.IN_MOVED_TO | unix.IN_MOVED_FROM | unix.IN_CREATE |
	unix.IN_DELETE | unix.IN_ATTRIB | unix.IN_DELETE_SELF | unix.IN_MOVE_SELF

// newKeyWatch watches path's folder; nil when the system will not (the
// caller then reads the file's stamp on every request).
func newKeyWatch(path string) *keyWatch {
	fd, err := unix.InotifyInit1(unix.IN_NONBLOCK | unix.IN_CLOEXEC)
	if err != nil {
		return nil
	}
	if _, err := unix.InotifyAddWatch(fd, filepath.Dir(path), keyWatchMask); err != nil {
		unix.Close(fd)
		return nil
	}
	return &keyWatch{fd: fd}
}

// errWatchLost means the watch can no longer be trusted: its queue
// overflowed, or the folder itself went.
var errWatchLost = errors.New("key file watch lost")

// changed drains the queue and reports whether it held any event; an
// error means the watch is lost (and closed).
func (w *keyWatch) changed() (bool, error) {
	if w.fd < 0 {
		return true, errWatchLost
	}
	hit := false
	for {
		n, err := unix.Read(w.fd, w.buf[:])
		if errors.Is(err, unix.EAGAIN) {
			return hit, nil
		}
		if err == nil && n <= 0 {
			err = errWatchLost
		}
		if err != nil {
			w.close()
			return true, err
		}
		for off := 0; off+unix.SizeofInotifyEvent <= n; {
			ev := (*unix.InotifyEvent)(unsafe.Pointer(&w.buf[off]))
			off += unix.SizeofInotifyEvent + int(ev.Len)
			if ev.Mask&(unix.IN_Q_OVERFLOW|unix.IN_IGNORED|unix.IN_DELETE_SELF|unix.IN_MOVE_SELF) != 0 {
				w.close()
				return true, errWatchLost
			}
			hit = true
		}
	}
}

func (w *keyWatch) close() {
	if w.fd >= 0 {
		unix.Close(w.fd)
		w.fd = -1
	}
}
