package anonymize

import (
	"crypto/hmac"
	"crypto/sha256"
	"hash"
)

// mac is the one HMAC-SHA256 (RFC 2104) primitive of the package: the
// pseudonymizer, the master key fingerprint and the sealing-key derivation
// all go through it, and the RFC 4231 tests check it. It reuses its hash
// state (Reset) and its output buffer, so compute does not allocate.
// It is not safe for concurrent use.
type mac struct {
	h   hash.Hash
	sum [sha256.Size]byte
}

func newMAC(key []byte) *mac {
	return &mac{h: hmac.New(sha256.New, key)}
}

// compute returns HMAC-SHA256(key, msg). The result aliases m's buffer and
// is valid until the next call.
func (m *mac) compute(msg []byte) []byte {
	m.h.Reset()
	m.h.Write(msg)
	return m.h.Sum(m.sum[:0])
}

// hmacSHA256 is a one-shot HMAC-SHA256 through the same primitive.
func hmacSHA256(key, msg []byte) [sha256.Size]byte {
	var out [sha256.Size]byte
	copy(out[:], newMAC(key).compute(msg))
	return out
}
