package cli_test

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/server"
)

// authorityOf reads a data directory's keys as the server does.
func authorityOf(t *testing.T, data string) *server.Authority {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(data, "instance.json"))
	if err != nil {
		t.Fatal(err)
	}
	var inst struct{ Issuer string }
	if err := json.Unmarshal(b, &inst); err != nil {
		t.Fatal(err)
	}
	var legacy []byte
	if _, err := os.Stat(filepath.Join(data, "signing.key")); err == nil {
		if legacy, err = server.LoadSigningKeyFile(filepath.Join(data, "signing.key")); err != nil {
			t.Fatal(err)
		}
	}
	a, err := server.OpenAuthority(filepath.Join(data, "keys.json"), legacy, inst.Issuer)
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// TestTokenLifecycle runs the token commands on a real data directory
// (real bbolt file, server stopped): issue records the token, list shows
// it, rotate adds a key that signs while the old one verifies, retire
// stops the old one, revoke marks the jti; a directory made before
// keys.json keeps its HS256 tokens verifying until legacy-hs256 is
// retired. Each change is in the audit trail.
func TestTokenLifecycle(t *testing.T) {
	data := filepath.Join(t.TempDir(), "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %s", errs)
	}
	if _, err := os.Stat(filepath.Join(data, "signing.key")); err == nil {
		t.Fatal("init wrote a legacy signing.key")
	}
	issue := func(args ...string) string {
		t.Helper()
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue %v: exit %d: %s", args, code, errs)
		}
		if strings.Contains(errs, "not recorded") {
			t.Fatalf("token issue with the server stopped did not record: %s", errs)
		}
		return strings.TrimSpace(out)
	}
	verify := func(tok string) error {
		_, err := authorityOf(t, data).Verify(tok)
		return err
	}
	tok1 := issue("--role", "member", "--project", "p", "--subject", "student")
	c1, err := authorityOf(t, data).Verify(tok1)
	if err != nil {
		t.Fatal(err)
	}

	// Above the role's maximum lifetime: refused by name.
	code, _, errs := run(t, nil, "token", "issue", "--data", data, "--role", "partner", "--dataset", "p/d", "--subject", "x", "--ttl", "876000h")
	if code == 0 || !strings.Contains(errs, "max_ttl") {
		t.Fatalf("ttl 100 years: exit %d, %q", code, errs)
	}

	code, out, errs := run(t, nil, "token", "list", "--data", data)
	if code != 0 || !strings.Contains(out, c1.ID) || !strings.Contains(out, "student") {
		t.Fatalf("token list: exit %d %q %s", code, out, errs)
	}

	code, out, _ = run(t, nil, "token", "keys", "--data", data)
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if code != 0 || len(lines) != 2 || !strings.HasSuffix(lines[1], "signs") {
		t.Fatalf("token keys: %q", out)
	}
	kid1 := strings.Fields(lines[1])[0]

	code, out, errs = run(t, nil, "token", "rotate", "--data", data)
	if code != 0 || !strings.HasPrefix(out, "new signing key ") {
		t.Fatalf("rotate: %d %q %s", code, out, errs)
	}
	kid2 := strings.TrimSpace(strings.TrimPrefix(out, "new signing key "))
	tok2 := issue("--role", "admin", "--subject", "ops")
	if err := verify(tok1); err != nil {
		t.Fatalf("old-key token after rotation: %v", err)
	}
	if code, _, errs := run(t, nil, "token", "retire", kid2, "--data", data); code == 0 || !strings.Contains(errs, "rotate first") {
		t.Fatalf("retiring the signing key: exit %d %q", code, errs)
	}
	if code, _, errs := run(t, nil, "token", "retire", kid1, "--data", data); code != 0 {
		t.Fatalf("retire: %s", errs)
	}
	if err := verify(tok1); err == nil {
		t.Fatal("a token of a retired key verified")
	}
	if err := verify(tok2); err != nil {
		t.Fatalf("token of the new key: %v", err)
	}

	code, out, errs = run(t, nil, "token", "revoke", c1.ID, "--data", data)
	if code == 0 || !strings.Contains(errs, "--reason") {
		t.Fatalf("revoke without reason: %d %q", code, errs)
	}
	if code, _, errs := run(t, nil, "token", "revoke", c1.ID, "--reason", "left the lab", "--data", data); code != 0 {
		t.Fatalf("revoke: %s", errs)
	}
	_, out, _ = run(t, nil, "token", "list", "--data", data)
	if !strings.Contains(out, "left the lab") {
		t.Fatalf("list after revoke: %q", out)
	}

	// A directory made before keys.json: its signing.key keeps verifying
	// HS256 tokens until legacy-hs256 is retired.
	signing := filepath.Join(data, "signing.key")
	if err := server.GenerateSigningKeyFile(signing); err != nil {
		t.Fatal(err)
	}
	key, err := server.LoadSigningKeyFile(signing)
	if err != nil {
		t.Fatal(err)
	}
	old, err := server.NewAuthority(key, authorityOf(t, data).Issuer()).Issue(server.Grant{Role: server.RoleAdmin, Subject: "old", TTL: time.Hour})
	if err != nil {
		t.Fatal(err)
	}
	if err := verify(old); err != nil {
		t.Fatalf("legacy HS256 token: %v", err)
	}
	if code, _, errs := run(t, nil, "token", "retire", server.LegacyKeyID, "--data", data); code != 0 {
		t.Fatalf("retire legacy: %s", errs)
	}
	if err := verify(old); err == nil {
		t.Fatal("legacy token verified after retirement")
	}

	master, err := anonymize.LoadMasterKeyFile(filepath.Join(data, "master.key"))
	if err != nil {
		t.Fatal(err)
	}
	blobs, err := localfs.New(filepath.Join(data, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	st, err := catalog.Open(filepath.Join(data, "catalog.db"), blobs, catalog.Options{Master: master, TempDir: filepath.Join(data, "tmp")})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	entries, err := st.Audit(t.Context())
	if err != nil {
		t.Fatal(err)
	}
	count := map[string]int{}
	for _, e := range entries {
		count[e.Action]++
	}
	if count["token.issue"] != 2 || count["token.revoke"] != 1 || count["key.rotate"] != 1 || count["key.retire"] != 2 {
		t.Fatalf("audit actions %v, want 2 issues, 1 revoke, 1 rotate, 2 retires", count)
	}
}
