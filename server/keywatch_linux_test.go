package server

import (
	"os"
	"path/filepath"
	"testing"
	"time"
)

// TestKeyWatch: the key file's watch answers "changed" within the call
// that replaced, rewrote or touched the file (so a retirement the command
// line finished holds for the next request), "unchanged" for files of the
// folder written while open and for files in its subfolders; a lost watch,
// or a key file that is a symbolic link, falls back to reading the stamp.
func TestKeyWatch(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "keys.json")
	ks := newKeyFile(t, path)
	a, err := OpenAuthority(path, nil, testIssuer)
	if err != nil {
		t.Fatal(err)
	}
	if a.watch == nil {
		t.Fatal("no watch on Linux")
	}
	changed := func(what string, want bool) {
		t.Helper()
		a.mu.Lock()
		got, err := a.watch.changed()
		a.mu.Unlock()
		if err != nil || got != want {
			t.Fatalf("%s: changed = %v, %v; want %v", what, got, err, want)
		}
	}
	changed("nothing done", false)

	// Other files: one kept open and written (the catalog, the journal),
	// one in a subfolder (blobs, the token spool).
	other, err := os.OpenFile(filepath.Join(dir, "catalog.db"), os.O_CREATE|os.O_WRONLY, 0o600)
	if err != nil {
		t.Fatal(err)
	}
	defer other.Close()
	os.Mkdir(filepath.Join(dir, "sub"), 0o700)
	changed("a file and a folder made", true) // any event of the folder: the stamp is read
	if got, err := a.keySet(); err != nil || len(got.Keys) != 1 {
		t.Fatalf("after other files were made: %+v, %v", got, err)
	}
	for range 100 {
		other.Write([]byte("x"))
	}
	os.WriteFile(filepath.Join(dir, "sub", "keys.json"), []byte("{}"), 0o600)
	changed("other files written", false)

	// A rotation saved (a temporary file renamed over the key file): the
	// next keySet reads it, with no wait.
	kid1 := ks.Keys[0].KID
	kid2, err := ks.Rotate(time.Now())
	if err != nil {
		t.Fatal(err)
	}
	if err := ks.Save(path); err != nil {
		t.Fatal(err)
	}
	got, err := a.keySet()
	if err != nil || len(got.Keys) != 2 || got.Keys[1].KID != kid2 {
		t.Fatalf("after a rotation: %+v, %v; want 2 keys, the second %s", got, err, kid2)
	}
	changed("read since", false)

	// Rewritten in place and closed, as an editor may.
	if err := ks.Retire(kid1, time.Now()); err != nil {
		t.Fatal(err)
	}
	saved := filepath.Join(dir, "saved.json")
	if err := ks.Save(saved); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(saved)
	if got, err := a.keySet(); err != nil || got.Keys[0].RetiredAt != nil {
		t.Fatalf("after another file was saved: %+v, %v; want the same keys", got, err)
	}
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
	if got, err := a.keySet(); err != nil || got.Keys[0].RetiredAt == nil {
		t.Fatalf("after an in-place write: %+v, %v; want the first key retired", got, err)
	}
	now := time.Now().Add(time.Hour)
	if err := os.Chtimes(path, now, now); err != nil {
		t.Fatal(err)
	}
	changed("touched", true)

	// The folder moved away: the watch is lost, the stamp read again on
	// every call, and a change still seen.
	moved := dir + "-moved"
	if err := os.Rename(dir, moved); err != nil {
		t.Fatal(err)
	}
	defer os.Rename(moved, dir)
	a.mu.Lock()
	_, err = a.watch.changed()
	a.mu.Unlock()
	if err == nil {
		t.Fatal("the folder moved: the watch not lost")
	}
	os.Rename(moved, dir)
	var ks3 KeySet
	kid3, _ := ks3.Rotate(time.Now())
	if err := ks3.Save(path); err != nil {
		t.Fatal(err)
	}
	if got, err := a.keySet(); err != nil || len(got.Keys) != 1 || got.Keys[0].KID != kid3 {
		t.Fatalf("with the watch lost: %+v, %v; want the one key %s", got, err, kid3)
	}
}

// TestKeyWatchSymlink: a key file that is a symbolic link (a mounted
// secret) changes where the folder's watch does not look; each change of
// its target is still seen by the next request.
func TestKeyWatchSymlink(t *testing.T) {
	dir, secrets := t.TempDir(), t.TempDir()
	target, path := filepath.Join(secrets, "keys.json"), filepath.Join(dir, "keys.json")
	ks := newKeyFile(t, target)
	if err := os.Symlink(target, path); err != nil {
		t.Fatal(err)
	}
	a, err := OpenAuthority(path, nil, testIssuer)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 3 {
		kid, err := ks.Rotate(time.Now())
		if err != nil {
			t.Fatal(err)
		}
		if err := ks.Save(target); err != nil {
			t.Fatal(err)
		}
		if got, err := a.keySet(); err != nil || len(got.Keys) != i+2 || got.Keys[i+1].KID != kid {
			t.Fatalf("rotation %d through the link: %+v, %v; want %d keys, the last %s", i, got, err, i+2, kid)
		}
	}
}
