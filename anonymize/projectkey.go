package anonymize

import (
	"crypto/aes"
	"crypto/cipher"
	"crypto/rand"
	"encoding/binary"
	"errors"
	"fmt"
)

// ProjectKeySize is the length of a project key in bytes (256 bits).
const ProjectKeySize = 32

// nonceSize is the AES-GCM standard nonce length.
const nonceSize = 12

// maxKeyIDLen bounds the id accepted by OpenProjectKey.
const maxKeyIDLen = 64

// ErrKeyMismatch reports a sealed project key that does not open: it was
// sealed under another master key or for another project, or it was altered.
var ErrKeyMismatch = errors.New("project key does not open under this master key and project")

// ErrMalformedKey reports a sealed project key whose fields have the wrong
// shape (empty id, wrong nonce or ciphertext length), as from a damaged record.
var ErrMalformedKey = errors.New("malformed sealed project key")

// SealedKey is a project key encrypted with AES-256-GCM under (a key derived
// from) the master key. The additional data binds it to the project name and
// to ID, so it opens only for that project. It is safe to store: without the
// master key it reveals nothing of the project key.
type SealedKey struct {
	ID         string `json:"id"`         // public key id, "pk-" and 12 base32 characters
	Nonce      []byte `json:"nonce"`      // 12-byte GCM nonce
	Ciphertext []byte `json:"ciphertext"` // 32-byte key and 16-byte tag
}

// NewProjectKey draws a random project key for project and returns it sealed
// under master, with a new random key id.
func NewProjectKey(master MasterKey, project string) (SealedKey, error) {
	if master.IsZero() {
		return SealedKey{}, errors.New("project key: master key not set")
	}
	if project == "" {
		return SealedKey{}, errors.New("project key: empty project name")
	}
	var key [ProjectKeySize]byte
	defer clear(key[:])
	nonce := make([]byte, nonceSize)
	if _, err := rand.Read(key[:]); err != nil {
		return SealedKey{}, fmt.Errorf("project key: %w", err)
	}
	if _, err := rand.Read(nonce); err != nil {
		return SealedKey{}, fmt.Errorf("project key: %w", err)
	}
	id, err := newKeyID()
	if err != nil {
		return SealedKey{}, fmt.Errorf("project key: %w", err)
	}
	aead, err := master.sealer()
	if err != nil {
		return SealedKey{}, fmt.Errorf("project key: %w", err)
	}
	ct := aead.Seal(nil, nonce, key[:], sealAD(project, id))
	return SealedKey{ID: id, Nonce: nonce, Ciphertext: ct}, nil
}

// OpenProjectKey unseals sk for project under master and returns a
// Pseudonymizer using the project key, as the only generation. It returns
// an error wrapping ErrKeyMismatch if master or project is not the one sk
// was sealed for, or if sk was altered, and one wrapping ErrMalformedKey
// if sk's fields have the wrong lengths.
func OpenProjectKey(master MasterKey, project string, sk SealedKey) (*Pseudonymizer, error) {
	return OpenKeyChain(master, project, []SealedKey{sk})
}

// OpenKeyChain unseals a project's key generations, oldest first, and
// returns the Pseudonymizer of the newest (see Pseudonym). It fails as
// OpenProjectKey does on any of them, and on an empty chain or a key id
// that occurs twice.
func OpenKeyChain(master MasterKey, project string, chain []SealedKey) (*Pseudonymizer, error) {
	if master.IsZero() {
		return nil, errors.New("project key: master key not set")
	}
	if len(chain) == 0 {
		return nil, fmt.Errorf("project key: no key: %w", ErrMalformedKey)
	}
	aead, err := master.sealer()
	if err != nil {
		return nil, fmt.Errorf("project key: %w", err)
	}
	p := &Pseudonymizer{buf: make([]byte, 0, 128)}
	for i, sk := range chain {
		if sk.ID == "" || len(sk.ID) > maxKeyIDLen || len(sk.Nonce) != nonceSize ||
			len(sk.Ciphertext) != ProjectKeySize+16 {
			return nil, fmt.Errorf("project key %q: %w", truncID(sk.ID), ErrMalformedKey)
		}
		for _, prev := range chain[:i] {
			if prev.ID == sk.ID {
				return nil, fmt.Errorf("project key %q twice in the chain: %w", sk.ID, ErrMalformedKey)
			}
		}
		key, err := aead.Open(nil, sk.Nonce, sk.Ciphertext, sealAD(project, sk.ID))
		if err != nil {
			return nil, fmt.Errorf("project key %s of project %q (tried master key %s): %w",
				sk.ID, project, master.ID(), ErrKeyMismatch)
		}
		p.gens = append(p.gens, newGeneration(sk.ID, key))
		clear(key)
	}
	return p, nil
}

// sealer returns the AEAD that seals project keys. Its key is derived from
// the master key by HMAC, so the master key itself is used only as an HMAC
// key (here and in ID), never directly as a cipher key.
func (k MasterKey) sealer() (cipher.AEAD, error) {
	sk := hmacSHA256(k[:], []byte("flowcat/v1/seal project key"))
	defer clear(sk[:])
	block, err := aes.NewCipher(sk[:])
	if err != nil {
		return nil, err
	}
	return cipher.NewGCM(block)
}

// sealAD is the additional data of a sealed key: a label, the project name
// with a length prefix (so no project/id split is ambiguous), and the id.
func sealAD(project, id string) []byte {
	const label = "flowcat/v1/project key\x00"
	ad := make([]byte, 0, len(label)+4+len(project)+len(id))
	ad = append(ad, label...)
	ad = binary.BigEndian.AppendUint32(ad, uint32(len(project)))
	ad = append(ad, project...)
	return append(ad, id...)
}

// newKeyID returns "pk-" and 12 random base32 characters (60 bits). It is
// independent of the key, so it reveals nothing of it.
func newKeyID() (string, error) {
	var b [8]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", err
	}
	return "pk-" + pseudoEncoding.EncodeToString(b[:])[:12], nil
}

func truncID(id string) string {
	if len(id) > maxKeyIDLen {
		return id[:maxKeyIDLen] + "..."
	}
	return id
}

// ResealProjectKey opens sk under oldMaster and seals the same project key
// under newMaster with a fresh nonce, keeping its id: pseudonyms made
// before stay equal to those made after. It fails with ErrKeyMismatch
// when sk does not open under oldMaster.
func ResealProjectKey(oldMaster, newMaster MasterKey, project string, sk SealedKey) (SealedKey, error) {
	if newMaster.IsZero() {
		return SealedKey{}, errors.New("project key: new master key not set")
	}
	p, err := OpenProjectKey(oldMaster, project, sk)
	if err != nil {
		return SealedKey{}, err
	}
	key := p.gens[0].key[:]
	defer clear(key)
	nonce := make([]byte, nonceSize)
	if _, err := rand.Read(nonce); err != nil {
		return SealedKey{}, fmt.Errorf("project key: %w", err)
	}
	aead, err := newMaster.sealer()
	if err != nil {
		return SealedKey{}, fmt.Errorf("project key: %w", err)
	}
	return SealedKey{ID: sk.ID, Nonce: nonce, Ciphertext: aead.Seal(nil, nonce, key, sealAD(project, sk.ID))}, nil
}
