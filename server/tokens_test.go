package server

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"net/http"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/golang-jwt/jwt/v5"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// TestEd25519Vector signs and verifies RFC 8032 section 7.1, TEST 1 (the
// empty message) through the JWT library's EdDSA method, the path tokens
// take. Values copied from RFC 8032 (recalled from memory; the test fails
// if a digit is wrong).
func TestEd25519Vector(t *testing.T) {
	seed, _ := hex.DecodeString("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	wantPub := "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
	wantSig := "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b"
	priv := ed25519.NewKeyFromSeed(seed)
	pub := priv.Public().(ed25519.PublicKey)
	if hex.EncodeToString(pub) != wantPub {
		t.Fatalf("public key %x, want %s (RFC 8032 section 7.1 TEST 1)", pub, wantPub)
	}
	sig, err := jwt.SigningMethodEdDSA.Sign("", priv)
	if err != nil {
		t.Fatal(err)
	}
	if hex.EncodeToString(sig) != wantSig {
		t.Fatalf("signature %x, want %s (RFC 8032 section 7.1 TEST 1)", sig, wantSig)
	}
	if err := jwt.SigningMethodEdDSA.Verify("", sig, pub); err != nil {
		t.Fatalf("verify: %v", err)
	}
	sig[0] ^= 1
	if err := jwt.SigningMethodEdDSA.Verify("", sig, pub); err == nil {
		t.Fatal("a changed signature verified")
	}
	// RFC 8037 appendix A.3: the JWK thumbprint (RFC 7638) of this key,
	// which flowcat uses as its kid (recalled from memory).
	if got, want := keyThumbprint(pub), "kPrK_qmxVWaYVA9wwBF6Iuo3vVzz7TxHCTwXBygrS4k"; got != want {
		t.Fatalf("thumbprint %s, want %s (RFC 8037 appendix A.3)", got, want)
	}
	// RFC 8037 appendix A.1/A.2: x and d of the same key, base64url.
	if got := base64.RawURLEncoding.EncodeToString(pub); got != "11qYAYKxCrfVS_7TyWQHOg7hcvPapiMlrwIaaPcHURo" {
		t.Fatalf("x = %s (RFC 8037 appendix A.2)", got)
	}
}

// keyEnv is a test server whose authority reads a key file, with a legacy
// HS256 key beside it.
type keyEnv struct {
	*testEnv
	keysPath string
	legacy   []byte
}

func newKeyEnv(t *testing.T) *keyEnv {
	t.Helper()
	dir := t.TempDir()
	keysPath := filepath.Join(dir, "keys.json")
	newKeyFile(t, keysPath)
	legacy := make([]byte, 32)
	rand.Read(legacy)
	a, err := OpenAuthority(keysPath, legacy, testIssuer)
	if err != nil {
		t.Fatal(err)
	}
	e := newEnvAt(t, filepath.Join(dir, "srv"), func(c *Config) { c.Authority = a })
	e.auth = a
	e.admin = e.token(Grant{Role: RoleAdmin, Subject: "admin-1"})
	return &keyEnv{testEnv: e, keysPath: keysPath, legacy: legacy}
}

// newKeyFile saves a key set of one new key at path and returns it.
func newKeyFile(t *testing.T, path string) *KeySet {
	t.Helper()
	var ks KeySet
	if _, err := ks.Rotate(time.Now()); err != nil {
		t.Fatal(err)
	}
	if err := ks.Save(path); err != nil {
		t.Fatal(err)
	}
	return &ks
}

func (e *keyEnv) keys() *KeySet {
	ks, err := LoadKeySet(e.keysPath)
	if err != nil {
		e.t.Fatal(err)
	}
	return ks
}

func (e *keyEnv) save(ks *KeySet) {
	if err := ks.Save(e.keysPath); err != nil {
		e.t.Fatal(err)
	}
}

func header(t *testing.T, tok string) map[string]any {
	t.Helper()
	b, err := base64.RawURLEncoding.DecodeString(strings.Split(tok, ".")[0])
	if err != nil {
		t.Fatal(err)
	}
	var h map[string]any
	if err := json.Unmarshal(b, &h); err != nil {
		t.Fatal(err)
	}
	return h
}

// signRaw signs a header and payload given as JSON text with priv, so
// that a claim can have a type the claims struct cannot express.
func signRaw(t *testing.T, priv ed25519.PrivateKey, hdr, payload string) string {
	t.Helper()
	s := base64.RawURLEncoding.EncodeToString([]byte(hdr)) + "." + base64.RawURLEncoding.EncodeToString([]byte(payload))
	sig, err := jwt.SigningMethodEdDSA.Sign(s, priv)
	if err != nil {
		t.Fatal(err)
	}
	return s + "." + base64.RawURLEncoding.EncodeToString(sig)
}

// TestKeyRotation checks kid headers, rotation (old keys verify until
// retired), retirement of an EdDSA key and of the legacy HS256 key, and
// the JWKS document another service verifies with.
func TestKeyRotation(t *testing.T) {
	e := newKeyEnv(t)
	first, _ := e.keys().Active()
	tok1 := e.admin
	h := header(t, tok1)
	if h["alg"] != "EdDSA" || h["kid"] != first.KID {
		t.Fatalf("header %v, want alg EdDSA and kid %s (RFC 8037 section 3.1)", h, first.KID)
	}
	legacyTok, err := NewAuthority(e.legacy, testIssuer).Issue(Grant{Role: RoleAdmin, Subject: "old", TTL: time.Hour})
	if err != nil {
		t.Fatal(err)
	}
	status := func(tok string) int { return e.get("/api/v1/projects", tok).Status }
	if s := status(tok1); s != 200 {
		t.Fatalf("first-key token: %d", s)
	}
	if s := status(legacyTok); s != 200 {
		t.Fatalf("legacy HS256 token before retirement: %d, want 200", s)
	}

	// Rotate: a new key signs; the first still verifies.
	ks := e.keys()
	kid2, err := ks.Rotate(time.Now())
	if err != nil {
		t.Fatal(err)
	}
	e.save(ks)
	tok2 := e.token(Grant{Role: RoleAdmin, Subject: "admin-2"})
	if header(t, tok2)["kid"] != kid2 || kid2 == first.KID {
		t.Fatalf("after rotation the token names kid %v, want %s", header(t, tok2)["kid"], kid2)
	}
	if status(tok1) != 200 || status(tok2) != 200 {
		t.Fatalf("after rotation: old %d new %d, want both 200", status(tok1), status(tok2))
	}

	// JWKS: both keys, OKP/Ed25519 (RFC 8037 section 2); a verifier that
	// knows only this document accepts tok2.
	r := e.get("/.well-known/jwks.json", "")
	e.mustStatus(r, 200, "jwks")
	var set JWKS
	e.decode(r, &set)
	if len(set.Keys) != 2 {
		t.Fatalf("jwks has %d keys, want 2: %s", len(set.Keys), r.Body)
	}
	for _, k := range set.Keys {
		if k.Kty != "OKP" || k.Crv != "Ed25519" || k.Alg != "EdDSA" || k.Use != "sig" {
			t.Errorf("jwk %+v: want kty OKP, crv Ed25519 (RFC 8037 section 2), alg EdDSA, use sig (RFC 7517 section 4.2)", k)
		}
		if strings.Contains(string(r.Body), `"d"`) || strings.Contains(string(r.Body), "seed") {
			t.Fatal("jwks holds private key material")
		}
	}
	_, err = jwt.Parse(tok2, func(tk *jwt.Token) (any, error) {
		for _, k := range set.Keys {
			if k.KID == tk.Header["kid"] {
				x, err := base64.RawURLEncoding.DecodeString(k.X)
				return ed25519.PublicKey(x), err
			}
		}
		return nil, errors.New("kid not in jwks")
	}, jwt.WithValidMethods([]string{"EdDSA"}), jwt.WithAudience(Audience), jwt.WithIssuer(testIssuer))
	if err != nil {
		t.Fatalf("verifying with the JWKS alone: %v", err)
	}

	// Retiring the key that signs is refused; retiring the first works.
	ks = e.keys()
	if err := ks.Retire(kid2, time.Now()); err == nil {
		t.Fatal("retiring the signing key was accepted")
	}
	if err := ks.Retire("nope", time.Now()); !errors.Is(err, ErrUnknownKey) {
		t.Fatalf("retire unknown: %v", err)
	}
	if err := ks.Retire(first.KID, time.Now()); err != nil {
		t.Fatal(err)
	}
	e.save(ks)
	if s := status(tok1); s != 401 {
		t.Fatalf("token of a retired key: %d, want 401", s)
	}
	if s := status(tok2); s != 200 {
		t.Fatalf("token of the signing key after retiring the other: %d", s)
	}
	e.decode(e.get("/.well-known/jwks.json", ""), &set)
	if len(set.Keys) != 1 || set.Keys[0].KID != kid2 {
		t.Fatalf("jwks after retirement: %+v, want only %s", set.Keys, kid2)
	}

	// The legacy HS256 key verifies until retired.
	if s := status(legacyTok); s != 200 {
		t.Fatalf("legacy token: %d", s)
	}
	ks = e.keys()
	if err := ks.Retire(LegacyKeyID, time.Now()); err != nil {
		t.Fatal(err)
	}
	e.save(ks)
	if s := status(legacyTok); s != 401 {
		t.Fatalf("legacy token after retiring %s: %d, want 401", LegacyKeyID, s)
	}
}

// TestTokenDefects checks EdDSA-specific defects and the header and claim
// type rules the JWT library leaves to the application.
func TestTokenDefects(t *testing.T) {
	e := newKeyEnv(t)
	k, _ := e.keys().Active()
	priv, err := k.private()
	if err != nil {
		t.Fatal(err)
	}
	_, stranger, _ := ed25519.GenerateKey(rand.Reader)
	now := time.Now().Unix()
	claims := func(exp string) string {
		return `{"iss":"` + testIssuer + `","sub":"s","aud":["` + Audience + `"],"exp":` + exp + `,"iat":` + jsonInt(now) + `,"nbf":` + jsonInt(now) + `,"jti":"j1","role":"admin"}`
	}
	good := claims(jsonInt(now + 3600))
	hdr := `{"alg":"EdDSA","typ":"JWT","kid":"` + k.KID + `"}`
	hs := NewAuthority(e.legacy, testIssuer)
	hsTok, _ := hs.Issue(Grant{Role: RoleAdmin, Subject: "x", TTL: time.Hour})
	// The raw tokens' jti is recorded, as issuing does; "j2" is not.
	if err := e.store.RecordToken(context.Background(), "test", catalog.TokenRecord{JTI: "j1", Subject: "s", Role: RoleAdmin}); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name string
		tok  string
		want int
	}{
		{"raw EdDSA token, all right (control)", signRaw(t, priv, hdr, good), 200},
		{"unknown crit header (RFC 7515 section 4.1.11)", signRaw(t, priv, `{"alg":"EdDSA","kid":"`+k.KID+`","crit":["x-flowcat-unknown"],"x-flowcat-unknown":1}`, good), 401},
		{"exp as a string (RFC 7519 section 4.1.4)", signRaw(t, priv, hdr, claims(`"`+jsonInt(now+3600)+`"`)), 401},
		{"iat as a string (RFC 7519 section 4.1.6)", signRaw(t, priv, hdr, strings.Replace(good, `"iat":`+jsonInt(now), `"iat":"`+jsonInt(now)+`"`, 1)), 401},
		{"EdDSA without kid", signRaw(t, priv, `{"alg":"EdDSA"}`, good), 401},
		{"EdDSA under an unknown kid", signRaw(t, priv, `{"alg":"EdDSA","kid":"unknown"}`, good), 401},
		{"signed by a stranger's key under a known kid", signRaw(t, stranger, hdr, good), 401},
		{"HS256 with a kid (RFC 8725 section 2.1: no key of one type under another alg)", hsWithKid(t, e.legacy, k.KID), 401},
		{"legacy HS256 (control)", hsTok, 200},
		{"EdDSA, signed right, but no record of its jti in the catalog", signRaw(t, priv, hdr, strings.Replace(good, `"jti":"j1"`, `"jti":"j2"`, 1)), 401},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if s := e.get("/api/v1/projects", tc.tok).Status; s != tc.want {
				t.Fatalf("status %d, want %d", s, tc.want)
			}
		})
	}
}

func jsonInt(n int64) string { b, _ := json.Marshal(n); return string(b) }

func hsWithKid(t *testing.T, key []byte, kid string) string {
	now := time.Now()
	tk := jwt.NewWithClaims(jwt.SigningMethodHS256, Claims{RegisteredClaims: jwt.RegisteredClaims{
		Issuer: testIssuer, Subject: "x", Audience: jwt.ClaimStrings{Audience}, ID: "j",
		ExpiresAt: jwt.NewNumericDate(now.Add(time.Hour)), IssuedAt: jwt.NewNumericDate(now), NotBefore: jwt.NewNumericDate(now),
	}, Role: RoleAdmin})
	tk.Header["kid"] = kid
	s, err := tk.SignedString(key)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// TestMaxTTL checks the per-role maximum lifetime: refused by name above
// it, accepted at it, and settable.
func TestMaxTTL(t *testing.T) {
	a := NewAuthority(make([]byte, 32), testIssuer)
	for role, max := range DefaultMaxTTL {
		g := Grant{Role: role, Subject: "s", Project: "p", Datasets: []string{"p/d"}, TTL: max}
		if _, err := a.Issue(g); err != nil {
			t.Errorf("%s at its maximum %s: %v", role, max, err)
		}
		g.TTL = max + time.Second
		if _, err := a.Issue(g); !errors.Is(err, ErrTTLTooLong) || !strings.Contains(err.Error(), "max_ttl") {
			t.Errorf("%s above its maximum: %v, want ErrTTLTooLong naming max_ttl", role, err)
		}
	}
	if _, err := a.Issue(Grant{Role: RolePartner, Subject: "s", Datasets: []string{"p/d"}, TTL: 876000 * time.Hour}); !errors.Is(err, ErrTTLTooLong) {
		t.Fatalf("100 years: %v", err)
	}
	a.MaxTTL = map[string]time.Duration{RolePartner: time.Hour}
	if _, err := a.Issue(Grant{Role: RolePartner, Subject: "s", Datasets: []string{"p/d"}, TTL: 2 * time.Hour}); !errors.Is(err, ErrTTLTooLong) {
		t.Fatalf("above a lowered maximum: %v", err)
	}
}

// TestRevocation issues tokens over the admin API, lists them, revokes one
// by jti and checks it stops at once, and reads the audit trail.
func TestRevocation(t *testing.T) {
	e := newKeyEnv(t)
	e.createProject("alpha")
	r := e.postJSON("/api/v1/admin/tokens", e.admin, map[string]any{"role": "curator", "subject": "cur-a", "project": "alpha", "ttl": "24h"})
	e.mustStatus(r, 201, "issue over the API")
	var issued struct{ Token string }
	e.decode(r, &issued)
	cur := issued.Token
	c, err := e.auth.Verify(cur)
	if err != nil {
		t.Fatal(err)
	}
	e.mustStatus(e.get("/api/v1/projects/alpha", cur), 200, "curator before revocation")

	// Refusals: above max_ttl, non-admins, no reason, unknown parameter.
	r = e.postJSON("/api/v1/admin/tokens", e.admin, map[string]any{"role": "partner", "subject": "p", "datasets": []string{"alpha/v"}, "ttl": "876000h"})
	e.mustStatus(r, 400, "ttl of 100 years")
	if b := e.apiErr(r); !strings.Contains(b.Error.Message, "max_ttl") {
		t.Errorf("message %q does not name max_ttl", b.Error.Message)
	}
	e.mustStatus(e.get("/api/v1/admin/tokens", cur), 403, "curator lists tokens")
	e.mustStatus(e.postJSON("/api/v1/admin/tokens/"+c.ID+"/revoke", cur, map[string]string{"reason": "x"}), 403, "curator revokes")
	e.mustStatus(e.postJSON("/api/v1/admin/tokens", cur, map[string]any{"role": "admin", "subject": "me", "ttl": "1h"}), 403, "curator issues")
	e.mustStatus(e.postJSON("/api/v1/admin/tokens/"+c.ID+"/revoke", e.admin, map[string]string{}), 400, "revoke without reason")
	e.mustStatus(e.get("/api/v1/admin/tokens?all=1", e.admin), 400, "unknown parameter")

	r = e.get("/api/v1/admin/tokens", e.admin)
	e.mustStatus(r, 200, "list")
	var list struct {
		Tokens []struct {
			JTI, Subject, Role string
			KID                string `json:"kid"`
			Revoked            *struct{ Reason string }
		}
	}
	e.decode(r, &list)
	// The test env records the tokens it issues: keep the one issued here.
	for _, tk := range list.Tokens {
		if tk.Subject == "cur-a" {
			list.Tokens = append(list.Tokens[:0], tk)
			break
		}
	}
	if len(list.Tokens) != 1 || list.Tokens[0].JTI != c.ID || list.Tokens[0].Subject != "cur-a" || list.Tokens[0].Revoked != nil {
		t.Fatalf("list %s, want the one curator token, not revoked", r.Body)
	}
	if k, _ := e.keys().Active(); list.Tokens[0].KID != k.KID || header(t, cur)["kid"] != k.KID {
		t.Fatalf("recorded kid %q, header kid %v, want %s", list.Tokens[0].KID, header(t, cur)["kid"], k.KID)
	}
	if strings.Contains(string(r.Body), cur) {
		t.Fatal("the token list holds the token itself")
	}

	e.mustStatus(e.postJSON("/api/v1/admin/tokens/"+c.ID+"/revoke", e.admin, map[string]string{"reason": "laptop lost"}), 200, "revoke")
	r = e.get("/api/v1/projects/alpha", cur)
	e.mustStatus(r, 401, "revoked token")
	if b := e.apiErr(r); !strings.Contains(b.Error.Message, "revoked") {
		t.Errorf("message %q does not say revoked", b.Error.Message)
	}
	e.mustStatus(e.get("/api/v1/projects/alpha", e.admin), 200, "other tokens still work")
	e.decode(e.get("/api/v1/admin/tokens", e.admin), &list)
	for _, tk := range list.Tokens {
		if tk.JTI == c.ID {
			list.Tokens = append(list.Tokens[:0], tk)
			break
		}
	}
	if list.Tokens[0].Revoked == nil || list.Tokens[0].Revoked.Reason != "laptop lost" {
		t.Fatalf("after revocation the list says %+v", list.Tokens)
	}

	entries, err := e.store.Audit(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]bool{}
	for _, a := range entries {
		if a.By == "test" { // the test env's own tokens
			continue
		}
		seen[a.Action] = true
		if a.Action == "token.issue" && !strings.Contains(a.Target, c.ID) {
			t.Errorf("issue entry %+v does not name jti %s", a, c.ID)
		}
		if strings.HasPrefix(a.Action, "token.") && (a.By != "admin-1" || a.TokenID == "" || a.Role != RoleAdmin || a.From == "") {
			t.Errorf("entry %+v: by %q, want the admin's subject", a, a.By)
		}
	}
	if !seen["token.issue"] || !seen["token.revoke"] {
		t.Fatalf("audit actions %v, want token.issue and token.revoke", seen)
	}
	_ = http.StatusOK
}

// TestVerifiedTokenMemory checks that remembering a verified token never
// lets through what a full check would refuse: the claims' times are
// checked on every use (RFC 7519 section 4.1.4), a retired key's tokens
// are refused at once, and other bytes are never taken for a remembered
// token.
func TestVerifiedTokenMemory(t *testing.T) {
	e := newKeyEnv(t)
	a := e.auth
	tok, err := a.Issue(Grant{Role: RoleAdmin, Subject: "memo", TTL: time.Hour})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 2; i++ {
		if _, err := a.Verify(tok); err != nil {
			t.Fatalf("use %d: %v", i, err)
		}
	}
	if _, ok := a.remembered(mustKeySet(t, a), tok); !ok {
		t.Fatal("a verified token is not remembered")
	}

	// Expiry: the remembered token is refused once past exp + ClockSkew.
	start := a.now
	a.now = func() time.Time { return start().Add(time.Hour + ClockSkew + time.Minute) }
	if _, err := a.Verify(tok); !errors.Is(err, ErrUnauthorized) {
		t.Fatalf("remembered token after expiry: %v, want ErrUnauthorized", err)
	}
	a.now = start

	// Other bytes: a changed signature is checked in full and refused.
	parts := strings.Split(tok, ".")
	sig := []byte(parts[2])
	sig[3] ^= 1
	if sig[3] == '.' || sig[3] > 'z' {
		sig[3] = 'A'
	}
	bad := parts[0] + "." + parts[1] + "." + string(sig)
	if _, err := a.Verify(bad); !errors.Is(err, ErrUnauthorized) {
		t.Fatalf("tampered signature: %v, want ErrUnauthorized", err)
	}

	// Retirement: rotate, retire the key that signed tok; refused at once.
	ks := e.keys()
	if _, err := ks.Rotate(time.Now()); err != nil {
		t.Fatal(err)
	}
	first := header(t, tok)["kid"].(string)
	if err := ks.Retire(first, time.Now()); err != nil {
		t.Fatal(err)
	}
	e.save(ks)
	if _, err := a.Verify(tok); !errors.Is(err, ErrUnauthorized) {
		t.Fatalf("remembered token of a retired key: %v, want ErrUnauthorized", err)
	}
	// The memory checks retirement itself, not only that the set changed.
	cur := mustKeySet(t, a)
	a.remember(cur, tok, &Claims{Role: RoleAdmin, kid: first})
	if _, ok := a.remembered(cur, tok); ok {
		t.Fatal("a token of a retired key counts as remembered")
	}
}

func mustKeySet(t *testing.T, a *Authority) *KeySet {
	t.Helper()
	ks, err := a.keySet()
	if err != nil {
		t.Fatal(err)
	}
	return ks
}
