//go:build !linux

package server

// keyWatch is Linux's inotify only; elsewhere the key file's stamp is
// read on every request.
type keyWatch struct{}

func newKeyWatch(string) *keyWatch         { return nil }
func (w *keyWatch) changed() (bool, error) { return true, nil }
func (w *keyWatch) close()                 {}
