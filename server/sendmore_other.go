//go:build !linux

package server

import "net"

// sendMore writes p to c; only Linux has MSG_MORE.
func sendMore(c *net.TCPConn, p []byte) error {
	_, err := c.Write(p)
	return err
}
