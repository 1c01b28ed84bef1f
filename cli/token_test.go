package cli_test

import (
	"encoding/base64"
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
	if code, _, errs := run(t, nil, "token", "retire", "--kid", kid2, "--data", data); code == 0 || !strings.Contains(errs, "rotate first") {
		t.Fatalf("retiring the signing key: exit %d %q", code, errs)
	}
	if code, _, errs := run(t, nil, "token", "retire", "--kid", kid1, "--data", data); code != 0 {
		t.Fatalf("retire: %s", errs)
	}
	if err := verify(tok1); err == nil {
		t.Fatal("a token of a retired key verified")
	}
	if err := verify(tok2); err != nil {
		t.Fatalf("token of the new key: %v", err)
	}

	code, _, errs = run(t, nil, "token", "revoke", c1.ID, "--data", data)
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

// TestTokensWhileServing runs the token commands beside a real server on
// loopback: a rotation and a retirement reach the running server without a
// restart, and a revocation over the API stops a token on its next request.
func TestTokensWhileServing(t *testing.T) {
	data := filepath.Join(t.TempDir(), "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %s", errs)
	}
	_, serveErr, stop := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
	defer stop()
	url := waitFor(t, "the server's URL in its log", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	issue := func(args ...string) string {
		t.Helper()
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue %v: exit %d: %s", args, code, errs)
		}
		if !strings.Contains(errs, "token-spool") {
			t.Errorf("token issue while serving did not say its record was spooled: %q", errs)
		}
		return strings.TrimSpace(out)
	}
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}
	admin := issue("--role", "admin", "--subject", "ops")
	works := func(tok string) bool {
		code, _, _ := run(t, as(tok), "project", "list")
		return code == 0
	}
	if !works(admin) {
		t.Fatal("admin token refused")
	}

	// Rotate while serving: the new key's tokens work, so do the old.
	if code, _, errs := run(t, nil, "token", "rotate", "--data", data); code != 0 || !strings.Contains(errs, "not written to the audit trail") {
		t.Fatalf("rotate while serving: exit %d, %q", code, errs)
	}
	admin2 := issue("--role", "admin", "--subject", "ops2")
	if !works(admin) || !works(admin2) {
		t.Fatalf("after rotation: old works %v, new works %v", works(admin), works(admin2))
	}
	_, keys, _ := run(t, nil, "token", "keys", "--data", data)
	first := strings.Fields(strings.Split(keys, "\n")[1])[0]
	// A key id is base64url and may begin with '-' (1 in 32 ids): --kid
	// and "--" both take it whatever it begins with.
	if code, _, errs := run(t, nil, "token", "retire", "--kid", first, "--data", data); code != 0 {
		t.Fatalf("retire: %s", errs)
	}
	if code, _, errs := run(t, nil, "token", "retire", "--data", data, "--", "-notakey"); code != 2 || !strings.Contains(errs, "-notakey") {
		t.Errorf("retire -- -notakey: exit %d %q", code, errs)
	}
	if code, _, errs := run(t, nil, "token", "retire", "--data", data); code != 2 || !strings.Contains(errs, "which key") {
		t.Errorf("retire without a key: exit %d %q", code, errs)
	}
	if works(admin) {
		t.Fatal("a token of a retired key still works on the running server")
	}

	// A token issued while serving is recorded by the server on first
	// use; one whose spooled record is gone does not work at all.
	ghost := issue("--role", "admin", "--subject", "ghost")
	if err := os.Remove(filepath.Join(data, "token-spool", jtiOf(t, ghost)+".json")); err != nil {
		t.Fatal(err)
	}
	if works(ghost) {
		t.Fatal("a token the catalog has no record of works")
	}

	// Revoke over the API a token issued while serving.
	if code, _, errs := run(t, as(admin2), "project", "create", "flow"); code != 0 {
		t.Fatalf("project create: %s", errs)
	}
	member := issue("--role", "member", "--subject", "student", "--project", "flow")
	if !works(member) {
		t.Fatal("member token refused")
	}
	jti := jtiOf(t, member)
	code, out, errs := run(t, as(admin2), "token", "revoke", jti, "--reason", "left the lab")
	if code != 0 || !strings.Contains(out, "revoked "+jti) {
		t.Fatalf("revoke over the API: exit %d %q %q", code, out, errs)
	}
	if works(member) {
		t.Fatal("a revoked token still works")
	}
	if !works(admin2) {
		t.Fatal("revoking one token stopped another")
	}
	code, out, _ = run(t, as(admin2), "token", "list")
	if code != 0 || !strings.Contains(out, jti) || !strings.Contains(out, "left the lab") || !strings.Contains(out, jti+"\tstudent\tmember\tflow") {
		t.Fatalf("token list over the API: %d %q", code, out)
	}
	code, out, errs = run(t, as(admin2), "audit", "--action", "token.issue", "--json")
	if code != 0 || !strings.Contains(out, jti) || !strings.Contains(out, "token spool") || strings.Contains(out, jtiOf(t, ghost)) {
		t.Fatalf("audit of spooled issues: exit %d %q %q", code, out, errs)
	}
	// With the server holding the catalog, --data names the way round.
	if code, _, errs := run(t, nil, "token", "list", "--data", data); code == 0 || !strings.Contains(errs, "--server") {
		t.Fatalf("token list --data while serving: exit %d %q", code, errs)
	}
}

func jtiOf(t *testing.T, tok string) string {
	t.Helper()
	b, err := base64.RawURLEncoding.DecodeString(strings.Split(tok, ".")[1])
	if err != nil {
		t.Fatal(err)
	}
	var c struct {
		JTI string `json:"jti"`
	}
	if err := json.Unmarshal(b, &c); err != nil || c.JTI == "" {
		t.Fatalf("no jti in %s", b)
	}
	return c.JTI
}
