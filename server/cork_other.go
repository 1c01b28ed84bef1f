//go:build !linux

package server

import "net"

// setCork does nothing where TCP_CORK is not known.
func setCork(net.Conn, bool) {}
