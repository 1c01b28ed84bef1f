package anonymize

import (
	"crypto/rand"
	"encoding/base64"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"strings"
)

// MasterKeySize is the length of a master key in bytes.
const MasterKeySize = 32

// MasterKey is the server's secret from which project keys are unsealed. Its
// String and GoString methods print only its fingerprint, so a MasterKey
// passed to a logger or fmt by mistake does not leak.
type MasterKey [MasterKeySize]byte

// ErrKeyFilePermissions reports a master key file that group or others may
// read.
var ErrKeyFilePermissions = errors.New("key file readable by group or others")

// maxKeyFile bounds how much of a key file is read; a key is under 100 bytes.
const maxKeyFile = 4096

// GenerateMasterKey returns a new random master key from crypto/rand.
func GenerateMasterKey() (MasterKey, error) {
	var k MasterKey
	if _, err := rand.Read(k[:]); err != nil {
		return MasterKey{}, fmt.Errorf("master key: %w", err)
	}
	return k, nil
}

// ParseMasterKey parses a master key written as 64 hexadecimal characters or
// as standard or URL-safe base64 (padded or not) of 32 bytes. Surrounding
// whitespace is ignored. Errors say what was wrong (e.g. "master key: want 32
// bytes, got 31") and never contain the text.
func ParseMasterKey(text string) (MasterKey, error) {
	k, err := parseMasterKey(text)
	if err != nil {
		return MasterKey{}, fmt.Errorf("master key: %w", err)
	}
	return k, nil
}

// parseMasterKey is ParseMasterKey without the "master key" prefix on errors.
func parseMasterKey(text string) (MasterKey, error) {
	s := strings.TrimSpace(text)
	if s == "" {
		return MasterKey{}, errors.New("empty")
	}
	hexLen, b64Len := -1, -1
	if len(s)%2 == 0 {
		if b, err := hex.DecodeString(s); err == nil {
			if len(b) == MasterKeySize {
				return keyFrom(b)
			}
			hexLen = len(b)
		}
	}
	for _, enc := range []*base64.Encoding{
		base64.StdEncoding, base64.URLEncoding, base64.RawStdEncoding, base64.RawURLEncoding,
	} {
		if b, err := enc.DecodeString(s); err == nil {
			if len(b) == MasterKeySize {
				return keyFrom(b)
			}
			if b64Len < 0 {
				b64Len = len(b)
			}
		}
	}
	switch {
	case len(s) == 2*MasterKeySize && hexLen < 0:
		return MasterKey{}, fmt.Errorf("%d characters but not valid hex", len(s))
	case hexLen >= 0:
		return MasterKey{}, fmt.Errorf("want %d bytes, got %d (from %d hex characters)", MasterKeySize, hexLen, len(s))
	case b64Len >= 0:
		return MasterKey{}, fmt.Errorf("want %d bytes, got %d (from %d base64 characters)", MasterKeySize, b64Len, len(s))
	}
	return MasterKey{}, fmt.Errorf("%d characters that are neither hex nor base64; want 64 hex characters or base64 of %d bytes", len(s), MasterKeySize)
}

func keyFrom(b []byte) (MasterKey, error) {
	var k MasterKey
	copy(k[:], b)
	clear(b)
	if k.IsZero() {
		return MasterKey{}, errors.New("all bytes are zero; generate a random key")
	}
	return k, nil
}

// IsZero reports whether k is the zero value (no key set).
func (k MasterKey) IsZero() bool {
	var z MasterKey
	return k == z
}

// ID returns a public fingerprint of k: the first 8 bytes of
// HMAC-SHA256(k, "flowcat master key id") in lower-case hex (16 characters).
// It identifies which master key a server expects and reveals nothing of it.
func (k MasterKey) ID() string {
	sum := hmacSHA256(k[:], []byte("flowcat master key id"))
	return hex.EncodeToString(sum[:8])
}

// Hex returns the key itself as 64 lower-case hex characters, the form
// WriteMasterKeyFile writes. It is the secret: print it only to a terminal
// the operator asked for it on.
func (k MasterKey) Hex() string { return hex.EncodeToString(k[:]) }

// String returns "master key " and the fingerprint, never the key.
func (k MasterKey) String() string { return "master key " + k.ID() }

// GoString is like String, so %#v does not print the key either.
func (k MasterKey) GoString() string { return "anonymize.MasterKey(" + k.ID() + ")" }

// LoadMasterKeyFile reads a master key from the file at path (see
// ParseMasterKey for the accepted forms). It refuses, with an error wrapping
// ErrKeyFilePermissions, a file that group or others may read or write
// (permission bits 0077); the message says to chmod 600 it.
func LoadMasterKeyFile(path string) (MasterKey, error) {
	f, err := os.Open(path)
	if err != nil {
		return MasterKey{}, fmt.Errorf("master key: %w", err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return MasterKey{}, fmt.Errorf("master key: %w", err)
	}
	if !st.Mode().IsRegular() {
		return MasterKey{}, fmt.Errorf("master key: %s is not a regular file", path)
	}
	// Windows has no Unix permission bits; its ACLs are the operator's job.
	if perm := st.Mode().Perm(); runtime.GOOS != "windows" && perm&0o077 != 0 {
		return MasterKey{}, fmt.Errorf("master key: %s has mode %04o: %w; run chmod 600 %s",
			path, perm, ErrKeyFilePermissions, path)
	}
	b, err := io.ReadAll(io.LimitReader(f, maxKeyFile+1))
	if err != nil {
		return MasterKey{}, fmt.Errorf("master key: %s: %w", path, err)
	}
	defer clear(b)
	if len(b) > maxKeyFile {
		return MasterKey{}, fmt.Errorf("master key: %s is larger than %d bytes", path, maxKeyFile)
	}
	k, err := parseMasterKey(string(b))
	if err != nil {
		return MasterKey{}, fmt.Errorf("master key: %s: %w", path, err)
	}
	return k, nil
}

// WriteMasterKeyFile writes k as hex and a newline to a new file at path with
// mode 0600, and syncs it (and, best effort, its directory). It fails if the
// file already exists, so a key is never overwritten.
func WriteMasterKeyFile(path string, k MasterKey) (err error) {
	if k.IsZero() {
		return errors.New("master key: refusing to write a zero key")
	}
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return fmt.Errorf("master key: %w", err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(path)
		}
	}()
	buf := make([]byte, 2*MasterKeySize+1)
	hex.Encode(buf, k[:])
	buf[len(buf)-1] = '\n'
	defer clear(buf)
	if _, err = f.Write(buf); err != nil {
		return fmt.Errorf("master key: %w", err)
	}
	if err = f.Sync(); err != nil {
		return fmt.Errorf("master key: %w", err)
	}
	if err = f.Close(); err != nil {
		return fmt.Errorf("master key: %w", err)
	}
	if d, derr := os.Open(filepath.Dir(path)); derr == nil {
		d.Sync() // best effort: makes the new directory entry durable
		d.Close()
	}
	return nil
}

// MasterKeyFromEnv reads a master key from the environment variable name.
// It returns ok false (and no error) when the variable is unset or blank, and
// ok true with an error when it is set but does not parse.
func MasterKeyFromEnv(name string) (k MasterKey, ok bool, err error) {
	v, set := os.LookupEnv(name)
	if !set || strings.TrimSpace(v) == "" {
		return MasterKey{}, false, nil
	}
	k, err = parseMasterKey(v)
	if err != nil {
		return MasterKey{}, true, fmt.Errorf("master key: $%s: %w", name, err)
	}
	return k, true, nil
}
