package server

import (
	"net"
	"syscall"
)

// setCork sets or clears TCP_CORK on c, a TCP connection (tcp(7)):
// while set, the kernel sends only full segments, so an answer's header
// and body written in turn leave together; clearing it sends what is
// held. Other connections (TLS, tests' pipes) are left alone.
func setCork(c net.Conn, on bool) {
	tc, ok := c.(*net.TCPConn)
	if !ok {
		return
	}
	rc, err := tc.SyscallConn()
	if err != nil {
		return
	}
	v := 0
	if on {
		v = 1
	}
	rc.Control(func(fd uintptr) {
		syscall.SetsockoptInt(int(fd), syscall.IPPROTO_TCP, syscall.TCP_CORK, v) //nolint:errcheck // an optimization only
	})
}
