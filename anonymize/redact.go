package anonymize

import (
	"encoding/json"
	"fmt"
	"log/slog"
)

// Keys must not leak through the generic printers and encoders: fmt with
// any verb, encoding/json, encoding (text) and log/slog all see only the
// key's fingerprint. One gap is fmt's own: it cannot call methods on an
// unexported struct field, so never print a struct that holds a key in
// one (catalog.Store, for instance).

// Format prints String for every verb, so %v, %x and %d of a key (or of a
// struct holding one) never show its bytes.
func (k MasterKey) Format(f fmt.State, verb rune) { fmt.Fprint(f, k.String()) }

// MarshalJSON encodes the fingerprint, never the key.
func (k MasterKey) MarshalJSON() ([]byte, error) { return json.Marshal(k.String()) }

// MarshalText encodes the fingerprint, never the key.
func (k MasterKey) MarshalText() ([]byte, error) { return []byte(k.String()), nil }

// LogValue logs the fingerprint, never the key.
func (k MasterKey) LogValue() slog.Value { return slog.StringValue(k.String()) }

// String names the pseudonymizer by its key id, never its key.
func (p *Pseudonymizer) String() string { return "pseudonymizer " + p.KeyID() }

// GoString is like String.
func (p *Pseudonymizer) GoString() string { return "anonymize.Pseudonymizer(" + p.KeyID() + ")" }

// Format prints String for every verb.
func (p *Pseudonymizer) Format(f fmt.State, verb rune) { fmt.Fprint(f, p.String()) }

// MarshalJSON encodes the key id, never the key.
func (p *Pseudonymizer) MarshalJSON() ([]byte, error) { return json.Marshal(p.String()) }

// LogValue logs the key id, never the key.
func (p *Pseudonymizer) LogValue() slog.Value { return slog.StringValue(p.String()) }
