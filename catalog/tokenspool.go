package catalog

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// A token spool is a folder of token records written by the command line
// while a server holds the catalog (bbolt takes an exclusive lock). The
// server imports a spooled record into the tokens bucket, with its audit
// entry, when it starts, when tokens are listed, and when a token it has
// no record of is presented; a token signed by an EdDSA key is honoured
// only once recorded. The folder sits in the data directory beside the
// signing keys and needs no more protection than they do: whoever can
// write it can read keys.json and sign tokens already.

// spooled is one file of a token spool.
type spooled struct {
	Record TokenRecord `json:"record"`
	By     string      `json:"by"`
	At     time.Time   `json:"at"`
}

// jtiFile bounds the jtis that name spool files: no path separators, no
// dots, so that a jti read from a token cannot name a file elsewhere.
var jtiFile = regexp.MustCompile(`^[A-Za-z0-9_-]{1,128}$`)

// SpoolToken writes r to the spool folder dir (created 0700 if missing),
// whole or not at all: a temporary file, synced, then renamed.
func SpoolToken(dir, by string, r TokenRecord, now time.Time) error {
	if !jtiFile.MatchString(r.JTI) {
		return fmt.Errorf("token spool: jti %q: want 1-128 of A-Z a-z 0-9 _ -: %w", truncate(r.JTI, 40), ErrInvalid)
	}
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return fmt.Errorf("token spool: %w", err)
	}
	b, err := json.Marshal(spooled{Record: r, By: by, At: now.UTC()})
	if err != nil {
		return fmt.Errorf("token spool: %w", err)
	}
	f, err := os.CreateTemp(dir, ".tmp-*")
	if err != nil {
		return fmt.Errorf("token spool: %w", err)
	}
	tmp := f.Name()
	_, err = f.Write(b)
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, filepath.Join(dir, r.JTI+".json"))
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("token spool: %w", err)
	}
	return nil
}

// ImportSpooledToken records the spooled record of jti from dir, if there
// is one, and removes its file; it reports whether the catalog now has a
// record of jti.
func (s *Store) ImportSpooledToken(ctx context.Context, dir, jti string) (bool, error) {
	if dir == "" || !jtiFile.MatchString(jti) {
		return false, nil
	}
	path := filepath.Join(dir, jti+".json")
	b, err := os.ReadFile(path)
	if errors.Is(err, os.ErrNotExist) {
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("token spool: %w", err)
	}
	var sp spooled
	if err := json.Unmarshal(b, &sp); err != nil {
		return false, fmt.Errorf("token spool: %s: %w", path, err)
	}
	if sp.Record.JTI != jti {
		return false, fmt.Errorf("token spool: %s holds the record of another token", path)
	}
	err = s.db.Update(func(tx *bolt.Tx) error {
		bt := tx.Bucket(bucketTokens)
		if bt.Get([]byte(jti)) != nil {
			return nil
		}
		r := sp.Record
		r.Revoked = nil
		if err := putJSON(bt, []byte(jti), r); err != nil {
			return err
		}
		return appendAudit(tx, AuditEntry{At: sp.At, By: sp.By, Action: "token.issue", Project: r.project(),
			Target: "token " + jti, Detail: "role " + r.Role + " for " + r.Subject + scopeText(r) + "; issued on the command line while the server ran, recorded from the token spool"})
	})
	if err != nil {
		return false, err
	}
	if err := os.Remove(path); err != nil {
		return true, fmt.Errorf("token spool: %w", err)
	}
	s.opt.Logger.Info("token record imported from the spool", "jti", jti)
	return true, nil
}

// ImportTokenSpool imports every record of the spool folder dir (none
// when it does not exist) and returns how many it imported.
func (s *Store) ImportTokenSpool(ctx context.Context, dir string) (int, error) {
	if dir == "" {
		return 0, nil
	}
	ents, err := os.ReadDir(dir)
	if errors.Is(err, os.ErrNotExist) {
		return 0, nil
	}
	if err != nil {
		return 0, fmt.Errorf("token spool: %w", err)
	}
	n := 0
	for _, e := range ents {
		jti, ok := strings.CutSuffix(e.Name(), ".json")
		if !ok || strings.HasPrefix(e.Name(), ".") {
			continue
		}
		did, err := s.ImportSpooledToken(ctx, dir, jti)
		if err != nil {
			return n, err
		}
		if did {
			n++
		}
	}
	return n, nil
}
