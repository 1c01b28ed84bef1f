package cli

import (
	"crypto/rand"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"slices"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server"
)

// dataDir is the layout of a server's data directory:
//
//	catalog.db     bbolt metadata
//	blobs/         snapshot files by sha256 (unless instance.json names an
//	               S3-compatible store)
//	tmp/           sort runs and files being written (pseudonymized only)
//	keys.json      Ed25519 token signing keys, by kid (0600)
//	signing.key    legacy HS256 token key of directories made before keys.json (0600)
//	master.key     master key sealing project keys (0600), unless kept elsewhere
//	instance.json  the token issuer name
//	token-spool/   records of tokens issued while a server held catalog.db
//	demo/          (demo only) a token per role, mapping profiles and the
//	               export held back for the guide's commands; the server
//	               never reads it
type dataDir string

// needData returns the data directory of a command that requires --data,
// or a usage error naming the command.
func needData(command, dir string) (dataDir, error) {
	if dir == "" {
		return "", usageErr("%s: --data DIR is required", command)
	}
	return dataDir(dir), nil
}

// onData is the RunE of a command on the server's data directory, given
// as --data DIR into *dir: run gets it; command names the command in the
// usage error when it is missing.
func onData(command string, dir *string, run func(cmd *cobra.Command, args []string, d dataDir) error) func(*cobra.Command, []string) error {
	return func(cmd *cobra.Command, args []string) error {
		d, err := needData(command, *dir)
		if err != nil {
			return err
		}
		return run(cmd, args, d)
	}
}

func (d dataDir) path(name string) string { return filepath.Join(string(d), name) }
func (d dataDir) db() string              { return d.path("catalog.db") }
func (d dataDir) blobs() string           { return d.path("blobs") }
func (d dataDir) tmp() string             { return d.path("tmp") }
func (d dataDir) signingKey() string      { return d.path("signing.key") }
func (d dataDir) keys() string            { return d.path("keys.json") }
func (d dataDir) masterKey() string       { return d.path("master.key") }
func (d dataDir) instance() string        { return d.path("instance.json") }
func (d dataDir) tokenSpool() string      { return d.path("token-spool") }

type instance struct {
	Issuer    string    `json:"issuer"`
	CreatedAt time.Time `json:"created_at"`
	// MaxTTL overrides the longest token lifetime per role, as Go
	// durations ("2160h"); roles not named keep server.DefaultMaxTTL.
	MaxTTL map[string]string `json:"max_ttl,omitempty"`
	// Blobs is where snapshot files are kept: s3://bucket/prefix, or ""
	// for the blobs/ folder of the data directory.
	Blobs string `json:"blobs,omitempty"`
}

// initDataDir creates a data directory. With an existing master key file
// (masterFile != "") it checks that key and creates none. blobs names
// the blob store (see openBlobs); it is reached before anything is
// written, so a wrong address or missing keys leave no directory behind.
func initDataDir(d dataDir, masterFile, blobs string) (createdMaster bool, err error) {
	if _, err := os.Stat(d.db()); err == nil {
		return false, fmt.Errorf("init: %s is a flowcat data directory already", d)
	}
	if blobs != "" {
		if _, err := d.openBlobs(blobs); err != nil {
			return false, fmt.Errorf("init: %w", err)
		}
	}
	if err := os.MkdirAll(string(d), 0o700); err != nil {
		return false, fmt.Errorf("init: %w", err)
	}
	for _, sub := range []string{d.blobs(), d.tmp()} {
		if err := os.MkdirAll(sub, 0o700); err != nil {
			return false, fmt.Errorf("init: %w", err)
		}
	}
	// A key given by flag or environment is the key, as serve will find
	// it; only without one does init make its own.
	master, _, given, err := givenMasterKey(masterFile)
	if err != nil {
		return false, fmt.Errorf("init: %w", err)
	}
	if !given {
		master, err = anonymize.GenerateMasterKey()
		if err != nil {
			return false, fmt.Errorf("init: %w", err)
		}
		if err := anonymize.WriteMasterKeyFile(d.masterKey(), master); err != nil {
			return false, fmt.Errorf("init: %w", err)
		}
		createdMaster = true
	}
	var ks server.KeySet
	if _, err := ks.Rotate(time.Now()); err != nil {
		return false, fmt.Errorf("init: %w", err)
	}
	if err := ks.Save(d.keys()); err != nil {
		return false, fmt.Errorf("init: %w", err)
	}
	var rnd [6]byte
	if _, err := rand.Read(rnd[:]); err != nil {
		return false, fmt.Errorf("init: %w", err)
	}
	inst := instance{Issuer: "flowcat:" + hex.EncodeToString(rnd[:]), CreatedAt: time.Now().UTC(), Blobs: blobs}
	b, _ := json.MarshalIndent(inst, "", "  ")
	if err := os.WriteFile(d.instance(), append(b, '\n'), 0o600); err != nil {
		return false, fmt.Errorf("init: %w", err)
	}
	st, err := d.openStore(master, slog.New(slog.DiscardHandler))
	if err != nil {
		return false, err
	}
	return createdMaster, st.Close()
}

func (d dataDir) readInstance() (instance, error) {
	var inst instance
	b, err := os.ReadFile(d.instance())
	if errors.Is(err, fs.ErrNotExist) {
		return inst, fmt.Errorf("%s is not a flowcat data directory (no instance.json); run flowcat init --data %s", d, d)
	}
	if err != nil {
		return inst, err
	}
	if err := json.Unmarshal(b, &inst); err != nil || inst.Issuer == "" {
		return inst, fmt.Errorf("%s: malformed", d.instance())
	}
	return inst, nil
}

// authority loads the token keys (keys.json, and signing.key when a
// directory made before keys.json has one), the issuer and the maximum
// lifetimes. It does not open the bbolt file, so it works while a server
// runs on the directory.
func (d dataDir) authority() (*server.Authority, error) {
	inst, err := d.readInstance()
	if err != nil {
		return nil, err
	}
	var legacy []byte
	if _, err := os.Stat(d.signingKey()); err == nil {
		if legacy, err = server.LoadSigningKeyFile(d.signingKey()); err != nil {
			return nil, err
		}
	}
	a, err := server.OpenAuthority(d.keys(), legacy, inst.Issuer)
	if err != nil {
		return nil, err
	}
	for role, v := range inst.MaxTTL {
		ttl, err := time.ParseDuration(v)
		if err != nil || ttl <= 0 || !slices.Contains(server.Roles, role) {
			return nil, fmt.Errorf("%s: max_ttl %q: %q: want a role and a positive duration such as 2160h", d.instance(), role, v)
		}
		if a.MaxTTL == nil {
			a.MaxTTL = map[string]time.Duration{}
		}
		a.MaxTTL[role] = ttl
	}
	return a, nil
}

// findMasterKey resolves the master key: a file given by flag, then
// FLOWCAT_MASTER_KEY (the key itself), then FLOWCAT_MASTER_KEY_FILE, then
// master.key in the data directory. It names every place it looked.
func (d dataDir) findMasterKey(flagFile string) (anonymize.MasterKey, string, error) {
	if k, from, given, err := givenMasterKey(flagFile); given || err != nil {
		return k, from, err
	}
	if _, err := os.Stat(d.masterKey()); err == nil {
		k, err := anonymize.LoadMasterKeyFile(d.masterKey())
		return k, d.masterKey(), err
	}
	return anonymize.MasterKey{}, "", fmt.Errorf("no master key: give --master-key FILE, or set FLOWCAT_MASTER_KEY (64 hex digits) or FLOWCAT_MASTER_KEY_FILE; `flowcat init` creates %s", d.masterKey())
}

// givenMasterKey reads the master key given from outside the data
// directory: a file named by flag, then FLOWCAT_MASTER_KEY (the key
// itself), then FLOWCAT_MASTER_KEY_FILE. given is false when none is set.
// init and serve both take the key from here first, so that a key given
// to a container is the one init seals the catalog under and serve opens
// it with.
func givenMasterKey(flagFile string) (k anonymize.MasterKey, from string, given bool, err error) {
	if flagFile != "" {
		k, err := anonymize.LoadMasterKeyFile(flagFile)
		return k, flagFile, true, err
	}
	if k, ok, err := anonymize.MasterKeyFromEnv("FLOWCAT_MASTER_KEY"); ok || err != nil {
		return k, "FLOWCAT_MASTER_KEY", true, err
	}
	if f := os.Getenv("FLOWCAT_MASTER_KEY_FILE"); f != "" {
		k, err := anonymize.LoadMasterKeyFile(f)
		return k, f, true, err
	}
	return anonymize.MasterKey{}, "", false, nil
}

// openStore opens the catalog on the blob store instance.json names.
func (d dataDir) openStore(master anonymize.MasterKey, log *slog.Logger, lim ...schema.Limits) (*catalog.Store, error) {
	var l schema.Limits
	if len(lim) > 0 {
		l = lim[0]
	}
	return d.openStoreWith(master, log, catalog.Options{Limits: l})
}

// openStoreWith opens the store with the options serve sets (upload
// limits, the change window's bound, a clock; zero values take the
// catalog's defaults).
func (d dataDir) openStoreWith(master anonymize.MasterKey, log *slog.Logger, set catalog.Options) (*catalog.Store, error) {
	inst, err := d.readInstance()
	if err != nil {
		return nil, err
	}
	blobs, err := d.openBlobs(inst.Blobs)
	if err != nil {
		return nil, err
	}
	if err := os.MkdirAll(d.tmp(), 0o700); err != nil {
		return nil, err
	}
	// Open clears what an interrupted run left in tmp/ and blobs/tmp/
	// once it holds the bbolt lock (only pseudonymized events).
	opt := catalog.Options{Master: master, TempDir: d.tmp(), Logger: log, Limits: set.Limits, Now: set.Now, ChangeWindowBytes: set.ChangeWindowBytes}
	return catalog.Open(d.db(), blobs, opt)
}
