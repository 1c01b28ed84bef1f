package server

import (
	"net"

	"golang.org/x/sys/unix"
)

// sendMore writes p to c with MSG_MORE (tcp(7), send(2)): the kernel
// holds a partial segment for the data the caller sends next, as a
// sendfile(2) that follows does, so that both leave together. Waiting
// for room and the connection's deadline are the runtime's (RawConn.Write).
func sendMore(c *net.TCPConn, p []byte) error {
	rc, err := c.SyscallConn()
	if err != nil {
		return err
	}
	var serr error
	for len(p) > 0 && serr == nil {
		err = rc.Write(func(fd uintptr) bool {
			n, e := unix.SendmsgN(int(fd), p, nil, nil, unix.MSG_MORE|unix.MSG_NOSIGNAL)
			switch {
			case e == unix.EAGAIN:
				return false
			case e == unix.EINTR:
				return true // the loop tries again
			case e != nil:
				serr = &net.OpError{Op: "write", Net: "tcp", Source: c.LocalAddr(), Addr: c.RemoteAddr(), Err: e}
			default:
				p = p[n:]
			}
			return true
		})
		if err != nil {
			return err
		}
	}
	return serr
}
