package server

import (
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"time"

	"github.com/flowcat-catalog/flowcat/server/api"
)

// LegacyKeyID names the HS256 key of signing.key in a key set's listing and
// in `token retire`. HS256 tokens carry no kid.
const LegacyKeyID = "legacy-hs256"

// SigningKey is one Ed25519 token signing key of a key set. Its kid is the
// JWK thumbprint of its public key (RFC 7638 section 3, over the members
// crv, kty, x of an OKP key, RFC 8037 section 2).
type SigningKey struct {
	KID       string     `json:"kid"`
	Seed      string     `json:"seed"` // base64url, the 32-byte private seed (RFC 8032 section 5.1.5)
	CreatedAt time.Time  `json:"created_at"`
	RetiredAt *time.Time `json:"retired_at,omitempty"`
}

// KeySet is the token key file (keys.json): the Ed25519 keys, newest
// last, and whether the legacy HS256 key of signing.key was retired.
type KeySet struct {
	Keys          []SigningKey `json:"keys"`
	LegacyRetired *time.Time   `json:"legacy_hs256_retired_at,omitempty"`
}

// keyThumbprint is the RFC 7638 thumbprint of an Ed25519 public key.
func keyThumbprint(pub ed25519.PublicKey) string {
	// RFC 7638 section 3.2: required members only, lexicographic order,
	// no whitespace.
	j := `{"crv":"Ed25519","kty":"OKP","x":"` + base64.RawURLEncoding.EncodeToString(pub) + `"}`
	sum := sha256.Sum256([]byte(j))
	return base64.RawURLEncoding.EncodeToString(sum[:])
}

func (k SigningKey) private() (ed25519.PrivateKey, error) {
	seed, err := base64.RawURLEncoding.DecodeString(k.Seed)
	if err != nil || len(seed) != ed25519.SeedSize {
		return nil, fmt.Errorf("key %s: seed is not 32 bytes of base64url", k.KID)
	}
	priv := ed25519.NewKeyFromSeed(seed)
	if keyThumbprint(priv.Public().(ed25519.PublicKey)) != k.KID {
		return nil, fmt.Errorf("key %s: kid is not the thumbprint of its key", k.KID)
	}
	return priv, nil
}

// Active returns the newest key not retired, or false.
func (ks *KeySet) Active() (SigningKey, bool) {
	for i := len(ks.Keys) - 1; i >= 0; i-- {
		if ks.Keys[i].RetiredAt == nil {
			return ks.Keys[i], true
		}
	}
	return SigningKey{}, false
}

// Rotate adds a new Ed25519 key, which signs from now on; the older keys
// still verify until retired. It returns the new key's kid.
func (ks *KeySet) Rotate(now time.Time) (string, error) {
	seed := make([]byte, ed25519.SeedSize)
	if _, err := rand.Read(seed); err != nil {
		return "", fmt.Errorf("rotate: %w", err)
	}
	pub := ed25519.NewKeyFromSeed(seed).Public().(ed25519.PublicKey)
	k := SigningKey{KID: keyThumbprint(pub), Seed: base64.RawURLEncoding.EncodeToString(seed), CreatedAt: now.UTC().Truncate(time.Second)}
	ks.Keys = append(ks.Keys, k)
	return k.KID, nil
}

// ErrUnknownKey means a retire named no key of the set.
var ErrUnknownKey = errors.New("no such key")

// Retire stops key kid (or LegacyKeyID) from verifying. Retiring the key
// that signs is refused: rotate first.
func (ks *KeySet) Retire(kid string, now time.Time) error {
	t := now.UTC().Truncate(time.Second)
	if kid == LegacyKeyID {
		if ks.LegacyRetired == nil {
			ks.LegacyRetired = &t
		}
		return nil
	}
	active, hasActive := ks.Active()
	for i := range ks.Keys {
		if ks.Keys[i].KID != kid {
			continue
		}
		if hasActive && active.KID == kid {
			return fmt.Errorf("retire: key %s signs new tokens: rotate first (flowcat token rotate)", kid)
		}
		if ks.Keys[i].RetiredAt == nil {
			ks.Keys[i].RetiredAt = &t
		}
		return nil
	}
	return fmt.Errorf("retire: key %q: %w", kid, ErrUnknownKey)
}

// JWK is one public key of a JWKS document (api.JWK).
type JWK = api.JWK

// JWKS is a JWK Set (api.JWKS).
type JWKS = api.JWKS

// JWKS returns the public halves of the keys that verify (not retired).
// The HS256 key is secret and never listed.
func (ks *KeySet) JWKS() JWKS {
	out := JWKS{Keys: []JWK{}}
	for _, k := range ks.Keys {
		if k.RetiredAt != nil {
			continue
		}
		priv, err := k.private()
		if err != nil {
			continue
		}
		out.Keys = append(out.Keys, JWK{Kty: "OKP", Crv: "Ed25519", X: base64.RawURLEncoding.EncodeToString(priv.Public().(ed25519.PublicKey)), KID: k.KID, Use: "sig", Alg: "EdDSA"})
	}
	return out
}

// LoadKeySet reads a key file; a missing file is an empty set.
func LoadKeySet(path string) (*KeySet, error) {
	b, err := os.ReadFile(path)
	if errors.Is(err, fs.ErrNotExist) {
		return &KeySet{}, nil
	}
	if err != nil {
		return nil, fmt.Errorf("keys: %w", err)
	}
	var ks KeySet
	if err := json.Unmarshal(b, &ks); err != nil {
		return nil, fmt.Errorf("keys: %s: %w", path, err)
	}
	for _, k := range ks.Keys {
		if _, err := k.private(); err != nil {
			return nil, fmt.Errorf("keys: %s: %w", path, err)
		}
	}
	return &ks, nil
}

// Save writes the key file with mode 0600, replacing it whole (a temporary
// file renamed over it), so a server reading it sees the old or the new
// set, never a part.
func (ks *KeySet) Save(path string) error {
	b, err := json.MarshalIndent(ks, "", "  ")
	if err != nil {
		return err
	}
	f, err := os.CreateTemp(filepath.Dir(path), ".keys-*.tmp")
	if err != nil {
		return fmt.Errorf("keys: %w", err)
	}
	tmp := f.Name()
	defer os.Remove(tmp)
	if err := f.Chmod(0o600); err != nil {
		f.Close()
		return fmt.Errorf("keys: %w", err)
	}
	if _, err := f.Write(append(b, '\n')); err != nil {
		f.Close()
		return fmt.Errorf("keys: %w", err)
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return fmt.Errorf("keys: %w", err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("keys: %w", err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("keys: %w", err)
	}
	return nil
}
