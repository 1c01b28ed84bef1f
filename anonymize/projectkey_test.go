package anonymize

import (
	"encoding/json"
	"errors"
	"regexp"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

func TestSealOpenRoundTrip(t *testing.T) {
	mk := testKey()
	sk, err := NewProjectKey(mk, "ed-flow")
	if err != nil {
		t.Fatal(err)
	}
	if !regexp.MustCompile(`^pk-[a-z2-7]{12}$`).MatchString(sk.ID) {
		t.Fatalf("key id %q is not pk- and 12 base32 characters", sk.ID)
	}
	if len(sk.Nonce) != 12 || len(sk.Ciphertext) != 48 {
		t.Fatalf("nonce %d bytes, ciphertext %d bytes", len(sk.Nonce), len(sk.Ciphertext))
	}

	// Stored as JSON and read back, as the catalog does.
	js, err := json.Marshal(sk)
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{`"id"`, `"nonce"`, `"ciphertext"`} {
		if !strings.Contains(string(js), name) {
			t.Fatalf("JSON %s lacks %s", js, name)
		}
	}
	var back SealedKey
	if err := json.Unmarshal(js, &back); err != nil {
		t.Fatal(err)
	}

	p1, err := OpenProjectKey(mk, "ed-flow", sk)
	if err != nil {
		t.Fatal(err)
	}
	p2, err := OpenProjectKey(mk, "ed-flow", back)
	if err != nil {
		t.Fatal(err)
	}
	if p1.KeyID() != sk.ID || p2.KeyID() != sk.ID {
		t.Fatal("KeyID differs from the sealed key's id")
	}
	for _, raw := range []string{"C-1001", "x", "ünïcode", strings.Repeat("long", 100)} {
		if a, b := p1.Pseudonym(schema.FieldCaseID, raw), p2.Pseudonym(schema.FieldCaseID, raw); a != b {
			t.Fatalf("same sealed key, different pseudonyms: %s %s", a, b)
		}
	}
}

func TestNewProjectKeyIsRandom(t *testing.T) {
	mk := testKey()
	a, err := NewProjectKey(mk, "p")
	if err != nil {
		t.Fatal(err)
	}
	b, err := NewProjectKey(mk, "p")
	if err != nil {
		t.Fatal(err)
	}
	if a.ID == b.ID || string(a.Nonce) == string(b.Nonce) || string(a.Ciphertext) == string(b.Ciphertext) {
		t.Fatal("two new project keys share id, nonce or ciphertext")
	}
	pa, _ := OpenProjectKey(mk, "p", a)
	pb, _ := OpenProjectKey(mk, "p", b)
	if pa.Pseudonym(schema.FieldCaseID, "C-1") == pb.Pseudonym(schema.FieldCaseID, "C-1") {
		t.Fatal("two new project keys give the same pseudonym")
	}
}

func TestOpenProjectKeyMismatch(t *testing.T) {
	mk := testKey()
	sk, err := NewProjectKey(mk, "ed-flow")
	if err != nil {
		t.Fatal(err)
	}
	flip := func(b []byte, i int) []byte {
		c := append([]byte(nil), b...)
		c[i] ^= 0x01
		return c
	}
	tests := []struct {
		name    string
		master  MasterKey
		project string
		sk      SealedKey
		want    error
	}{
		{"wrong master key", testKeyOther(), "ed-flow", sk, ErrKeyMismatch},
		{"other project", mk, "ed-flow-2", sk, ErrKeyMismatch},
		{"project prefix", mk, "ed-flo", sk, ErrKeyMismatch},
		{"tampered ciphertext", mk, "ed-flow", SealedKey{sk.ID, sk.Nonce, flip(sk.Ciphertext, 3)}, ErrKeyMismatch},
		{"tampered tag", mk, "ed-flow", SealedKey{sk.ID, sk.Nonce, flip(sk.Ciphertext, 47)}, ErrKeyMismatch},
		{"tampered nonce", mk, "ed-flow", SealedKey{sk.ID, flip(sk.Nonce, 0), sk.Ciphertext}, ErrKeyMismatch},
		{"other key id", mk, "ed-flow", SealedKey{"pk-aaaaaaaaaaaa", sk.Nonce, sk.Ciphertext}, ErrKeyMismatch},
		{"truncated ciphertext", mk, "ed-flow", SealedKey{sk.ID, sk.Nonce, sk.Ciphertext[:40]}, ErrMalformedKey},
		{"empty id", mk, "ed-flow", SealedKey{"", sk.Nonce, sk.Ciphertext}, ErrMalformedKey},
		{"short nonce", mk, "ed-flow", SealedKey{sk.ID, sk.Nonce[:8], sk.Ciphertext}, ErrMalformedKey},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			p, err := OpenProjectKey(tt.master, tt.project, tt.sk)
			if !errors.Is(err, tt.want) || p != nil {
				t.Fatalf("got %v, want %v", err, tt.want)
			}
			if strings.Contains(err.Error(), tt.master.Hex()) {
				t.Fatal("error contains the master key")
			}
		})
	}
	if _, err := OpenProjectKey(MasterKey{}, "ed-flow", sk); err == nil {
		t.Fatal("zero master key accepted")
	}
	if _, err := NewProjectKey(MasterKey{}, "ed-flow"); err == nil {
		t.Fatal("sealed under a zero master key")
	}
	if _, err := NewProjectKey(mk, ""); err == nil {
		t.Fatal("sealed for an empty project name")
	}
}

// TestResealProjectKey checks that a project key re-sealed under a new
// master key keeps its id and gives the same pseudonyms, opens under the
// new master only, and that re-sealing under a wrong old master fails
// with ErrKeyMismatch.
func TestResealProjectKey(t *testing.T) {
	oldM, _ := GenerateMasterKey()
	newM, _ := GenerateMasterKey()
	sk, err := NewProjectKey(oldM, "p")
	if err != nil {
		t.Fatal(err)
	}
	re, err := ResealProjectKey(oldM, newM, "p", sk)
	if err != nil {
		t.Fatal(err)
	}
	if re.ID != sk.ID || string(re.Ciphertext) == string(sk.Ciphertext) {
		t.Fatalf("resealed %+v from %+v: want the same id, another ciphertext", re, sk)
	}
	a, err := OpenProjectKey(oldM, "p", sk)
	if err != nil {
		t.Fatal(err)
	}
	b, err := OpenProjectKey(newM, "p", re)
	if err != nil {
		t.Fatal(err)
	}
	if a.Pseudonym(schema.FieldCaseID, "C-1") != b.Pseudonym(schema.FieldCaseID, "C-1") {
		t.Fatal("the re-sealed key gives other pseudonyms")
	}
	if _, err := OpenProjectKey(oldM, "p", re); !errors.Is(err, ErrKeyMismatch) {
		t.Fatalf("the re-sealed key opens under the old master: %v", err)
	}
	if _, err := ResealProjectKey(newM, oldM, "p", sk); !errors.Is(err, ErrKeyMismatch) {
		t.Fatalf("re-seal under a wrong old master: %v", err)
	}
}
