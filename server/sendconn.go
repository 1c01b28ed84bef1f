package server

import (
	"io"
	"net"
)

// Listener wraps ln, whose connections the server's http.Server serves,
// so that a handler can have a small answer's header and body leave in one
// write (oneSend). Connections other than TCP ones pass unchanged.
func Listener(ln net.Listener) net.Listener { return sendListener{ln} }

type sendListener struct{ net.Listener }

func (l sendListener) Accept() (net.Conn, error) {
	c, err := l.Listener.Accept()
	if tc, ok := c.(*net.TCPConn); ok && err == nil {
		return &sendConn{TCPConn: tc}, nil
	}
	return c, err
}

// sendConn is a served TCP connection that can hold back what net/http
// writes to it. net/http writes an answer through a 4 KiB buffer: the
// header and the body's first bytes, then the rest of the body, two
// writes and so two sends. While held, the first write is copied and the
// next goes out with it in one writev(2) (net.Buffers); release sends
// whatever is still held. Only the handler's goroutine writes to a
// connection (net/http's rule), so no lock is needed.
type sendConn struct {
	*net.TCPConn
	holding bool
	held    []byte
	// sends counts the writes made to the socket, for tests.
	sends int
}

func (c *sendConn) Write(p []byte) (int, error) {
	if c.holding && len(c.held) == 0 {
		c.held = append(c.held, p...)
		return len(p), nil
	}
	c.sends++
	if len(c.held) == 0 {
		return c.TCPConn.Write(p)
	}
	bufs := net.Buffers{c.held, p}
	n, err := bufs.WriteTo(c.TCPConn)
	held := int64(len(c.held))
	c.held = c.held[:0]
	if n < held {
		// The held bytes did not all leave: report none of p written,
		// with the error the connection gave.
		return 0, err
	}
	return int(n - held), err
}

// ReadFrom keeps net/http's sendfile path (the embedded connection's
// ReadFrom), after anything held.
func (c *sendConn) ReadFrom(r io.Reader) (int64, error) {
	if err := c.release(); err != nil {
		return 0, err
	}
	c.sends++
	return c.TCPConn.ReadFrom(r)
}

// hold starts holding back writes.
func (c *sendConn) hold() { c.holding = true }

// release stops holding and sends what is held.
func (c *sendConn) release() error {
	c.holding = false
	if len(c.held) == 0 {
		return nil
	}
	c.sends++
	_, err := c.TCPConn.Write(c.held)
	c.held = c.held[:0]
	return err
}
