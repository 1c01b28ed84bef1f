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
// next goes out with it in one writev(2) (net.Buffers), which ends the
// hold; a ReadFrom (sendfile) sends it ahead of the file's bytes, marked
// as having more to follow; release sends whatever is still held. Only
// the handler's goroutine writes to a connection (net/http's rule), so no
// lock is needed.
type sendConn struct {
	*net.TCPConn
	holding bool
	held    []byte
	// For tests: the writes made to the socket, those of them marked as
	// having more to follow, and the pushes after a ReadFrom that sent
	// nothing.
	sends, moreSends, pushes int
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
	c.held, c.holding = c.held[:0], false
	if n < held {
		// The held bytes did not all leave: report none of p written,
		// with the error the connection gave.
		return 0, err
	}
	return int(n - held), err
}

// ReadFrom keeps net/http's sendfile path (the embedded connection's
// ReadFrom). What is held (a download's header and its first bytes) goes
// first, marked as having more to follow (sendMore), so that it leaves
// with the file's first bytes rather than in a segment of its own.
//
// A file with nothing left to send (net/http has copied its first bytes
// already) would leave the held bytes waiting for more: then the
// connection is pushed (setting TCP_NODELAY, already set, sends what
// waits; tcp(7)).
func (c *sendConn) ReadFrom(r io.Reader) (int64, error) {
	c.holding = false
	more := len(c.held) > 0
	if more {
		c.sends++
		c.moreSends++
		err := sendMore(c.TCPConn, c.held)
		c.held = c.held[:0]
		if err != nil {
			return 0, err
		}
	}
	c.sends++
	n, err := c.TCPConn.ReadFrom(r)
	if more && n == 0 {
		c.pushes++
		if perr := c.TCPConn.SetNoDelay(true); err == nil {
			err = perr
		}
	}
	return n, err
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
