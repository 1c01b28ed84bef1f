package anonymize

import (
	"encoding/base64"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// testKey returns a fixed key whose bytes make base64 use '+' '/' (standard)
// and '-' '_' (URL), so both alphabets are exercised.
func testKey() MasterKey {
	var k MasterKey
	for i := range k {
		k[i] = byte(0xf8 + i*7)
	}
	return k
}

func TestParseMasterKey(t *testing.T) {
	k := testKey()
	h := hex.EncodeToString(k[:])
	std := base64.StdEncoding.EncodeToString(k[:])
	url := base64.URLEncoding.EncodeToString(k[:])
	if !strings.ContainsAny(std, "+/") || !strings.ContainsAny(url, "-_") {
		t.Fatalf("test key does not exercise both base64 alphabets: %s %s", std, url)
	}
	ok := []struct{ name, text string }{
		{"hex", h},
		{"hex upper", strings.ToUpper(h)},
		{"hex with whitespace", "  \t" + h + "\r\n"},
		{"base64 std", std},
		{"base64 url", url},
		{"base64 raw std", base64.RawStdEncoding.EncodeToString(k[:])},
		{"base64 raw url", base64.RawURLEncoding.EncodeToString(k[:]) + "\n"},
	}
	for _, tt := range ok {
		t.Run(tt.name, func(t *testing.T) {
			got, err := ParseMasterKey(tt.text)
			if err != nil {
				t.Fatal(err)
			}
			if got != k {
				t.Fatalf("parsed a different key")
			}
		})
	}

	b31 := k[:31]
	b33 := append(k[:], 0x42)
	bad := []struct{ name, text, wantMsg string }{
		{"empty", "  \n", "empty"},
		{"31 bytes hex", hex.EncodeToString(b31), "want 32 bytes, got 31"},
		{"31 bytes base64", base64.StdEncoding.EncodeToString(b31), "want 32 bytes, got 31"},
		{"33 bytes hex", hex.EncodeToString(b33), "want 32 bytes, got 33"},
		{"not an encoding", "secret-key-text-with-%-signs!!", "neither hex nor base64"},
		{"hex with a bad char", h[:63] + "g", "not valid hex"},
		{"all zero", strings.Repeat("0", 64), "zero"},
	}
	for _, tt := range bad {
		t.Run(tt.name, func(t *testing.T) {
			_, err := ParseMasterKey(tt.text)
			if err == nil {
				t.Fatal("accepted")
			}
			msg := err.Error()
			if !strings.HasPrefix(msg, "master key: ") || !strings.Contains(msg, tt.wantMsg) {
				t.Fatalf("error %q, want it to contain %q", msg, tt.wantMsg)
			}
			if s := strings.TrimSpace(tt.text); s != "" && strings.Contains(msg, s) {
				t.Fatalf("error %q contains the key text", msg)
			}
			// Nor any 8-character run of it.
			for i := 0; i+8 <= len(strings.TrimSpace(tt.text)); i++ {
				if run := strings.TrimSpace(tt.text)[i : i+8]; strings.Contains(msg, run) {
					t.Fatalf("error %q contains key text %q", msg, run)
				}
			}
		})
	}
}

func TestMasterKeyIDAndFormatting(t *testing.T) {
	k := testKey()
	id := k.ID()
	if !regexp.MustCompile(`^[0-9a-f]{16}$`).MatchString(id) {
		t.Fatalf("ID %q is not 16 hex characters", id)
	}
	if id != k.ID() {
		t.Fatal("ID is not stable")
	}
	other := k
	other[0] ^= 1
	if other.ID() == id {
		t.Fatal("different keys share an ID")
	}
	if strings.Contains(k.Hex(), id) {
		t.Fatal("ID is part of the key's hex")
	}
	for _, verb := range []string{"%v", "%s", "%x", "%#v", "%q"} {
		out := fmt.Sprintf(verb, k)
		if strings.Contains(out, k.Hex()) || strings.Contains(strings.ToLower(out), k.Hex()[:16]) {
			t.Fatalf("%s prints the key: %s", verb, out)
		}
	}
	if got, err := ParseMasterKey(k.Hex()); err != nil || got != k {
		t.Fatalf("Hex does not round-trip: %v", err)
	}
}

func TestGenerateMasterKey(t *testing.T) {
	a, err := GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	b, err := GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	if a == b || a.IsZero() {
		t.Fatal("generated keys are not random")
	}
}

func TestMasterKeyFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "master.key")
	k := testKey()
	if err := WriteMasterKeyFile(path, k); err != nil {
		t.Fatal(err)
	}
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	if perm := st.Mode().Perm(); perm != 0o600 {
		t.Fatalf("mode %04o, want 0600", perm)
	}
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if string(raw) != k.Hex()+"\n" {
		t.Fatalf("file content is not hex and newline")
	}
	got, err := LoadMasterKeyFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if got != k {
		t.Fatal("loaded a different key")
	}

	// Never overwrite an existing key.
	if err := WriteMasterKeyFile(path, testKeyOther()); err == nil {
		t.Fatal("overwrote an existing key file")
	}
	if again, _ := LoadMasterKeyFile(path); again != k {
		t.Fatal("existing key file changed")
	}

	// A file readable by group or others is refused.
	for _, mode := range []os.FileMode{0o644, 0o640, 0o604, 0o660} {
		if err := os.Chmod(path, mode); err != nil {
			t.Fatal(err)
		}
		_, err := LoadMasterKeyFile(path)
		if !errors.Is(err, ErrKeyFilePermissions) {
			t.Fatalf("mode %04o: got %v, want ErrKeyFilePermissions", mode, err)
		}
		if !strings.Contains(err.Error(), "chmod 600") {
			t.Fatalf("mode %04o: message %q does not say chmod 600", mode, err)
		}
	}
	if err := os.Chmod(path, 0o400); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadMasterKeyFile(path); err != nil {
		t.Fatalf("mode 0400 refused: %v", err)
	}

	// A private file with bad content: the error names the file, not the key.
	bad := filepath.Join(dir, "short.key")
	text := hex.EncodeToString(k[:31])
	if err := os.WriteFile(bad, []byte(text+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err = LoadMasterKeyFile(bad)
	if err == nil || !strings.Contains(err.Error(), "got 31") || strings.Contains(err.Error(), text) {
		t.Fatalf("short key file: %v", err)
	}

	if _, err := LoadMasterKeyFile(filepath.Join(dir, "missing.key")); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("missing file: %v", err)
	}
}

func testKeyOther() MasterKey {
	k := testKey()
	k[31] ^= 0xff
	return k
}

func TestMasterKeyFromEnv(t *testing.T) {
	const name = "FLOWCAT_TEST_MASTER_KEY"
	k := testKey()

	t.Setenv(name, "")
	if _, ok, err := MasterKeyFromEnv(name); ok || err != nil {
		t.Fatalf("blank: ok=%v err=%v", ok, err)
	}
	os.Unsetenv(name)
	if _, ok, err := MasterKeyFromEnv(name); ok || err != nil {
		t.Fatalf("unset: ok=%v err=%v", ok, err)
	}

	t.Setenv(name, base64.StdEncoding.EncodeToString(k[:])+"\n")
	got, ok, err := MasterKeyFromEnv(name)
	if !ok || err != nil || got != k {
		t.Fatalf("set: ok=%v err=%v same=%v", ok, err, got == k)
	}

	short := hex.EncodeToString(k[:31])
	t.Setenv(name, short)
	_, ok, err = MasterKeyFromEnv(name)
	if !ok || err == nil {
		t.Fatalf("bad: ok=%v err=%v", ok, err)
	}
	if !strings.Contains(err.Error(), name) || strings.Contains(err.Error(), short) {
		t.Fatalf("bad: message %q", err)
	}
}
