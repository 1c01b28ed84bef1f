package server

import (
	"bytes"
	"crypto/rand"
	"encoding/base32"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"runtime"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/golang-jwt/jwt/v5"
	lru "github.com/hashicorp/golang-lru/v2"
)

// Roles a token can carry.
const (
	RoleAdmin   = "admin"   // everything, on every project
	RoleCurator = "curator" // manages one project: datasets, uploads, reads
	RoleMember  = "member"  // reads one project's datasets and versions
	RolePartner = "partner" // uploads to the datasets named in the token
)

// Roles lists the valid roles.
var Roles = []string{RoleAdmin, RoleCurator, RoleMember, RolePartner}

// Audience is the aud claim every flowcat API token carries.
const Audience = "flowcat-api"

// ErrUnauthorized means no valid token was presented (HTTP 401).
var ErrUnauthorized = errors.New("unauthorized")

// Claims are a flowcat token's claims: the registered ones (RFC 7519
// section 4.1) plus the role and its scope.
type Claims struct {
	jwt.RegisteredClaims
	Role     string   `json:"role"`
	Project  string   `json:"project,omitempty"`  // curator and member
	Datasets []string `json:"datasets,omitempty"` // partner: "project/dataset" refs
	// Sites bind a partner to the sites it writes: an upload with an event
	// of another site is refused whole. Absent: any site.
	Sites []string `json:"sites,omitempty"`
	// Replace lets a partner bound to sites upload in mode replace-window
	// for those sites (a curator's grant); replace-all stays refused.
	Replace bool `json:"replace,omitempty"`

	kid string // the header's key id; "" for HS256
}

// Grant is what a token is issued for.
type Grant struct {
	Role     string
	Subject  string
	Project  string
	Datasets []string
	Sites    []string // partner: the sites it may write; empty for any
	Replace  bool     // partner with sites: may replace-window its sites
	TTL      time.Duration
}

// Default maximum token lifetimes per role (common practice: the wider a
// token's power, the shorter it lives). Authority.MaxTTL overrides them.
var DefaultMaxTTL = map[string]time.Duration{
	RoleAdmin:   7 * 24 * time.Hour,
	RoleCurator: 7 * 24 * time.Hour,
	RoleMember:  30 * 24 * time.Hour,
	RolePartner: 90 * 24 * time.Hour,
}

// ClockSkew is the leeway allowed on exp, nbf and iat (RFC 8725 section
// 3.10 asks for a bounded one; the figure is common practice).
const ClockSkew = 30 * time.Second

// Authority issues and verifies tokens: EdDSA (Ed25519) under the keys of
// a key file, each token naming its key by kid, and, for data directories
// made before keys existed, HS256 under the legacy signing.key until that
// key is retired.
type Authority struct {
	issuer string
	now    func() time.Time
	legacy []byte // HS256 key; nil when there is none

	// MaxTTL is the longest lifetime Issue grants per role (default
	// DefaultMaxTTL).
	MaxTTL map[string]time.Duration

	keysPath string // "" for a fixed set
	mu       sync.Mutex
	keys     *KeySet
	stamp    time.Time // modification time of keysPath when read
	size     int64
	watch    *keyWatch // nil: the stamp is read on every request

	seenOnce sync.Once
	seen     *lru.Cache[string, verified] // tokens verified before (remembered)

	validOnce sync.Once
	valid     *jwt.Validator // claimValidator
}

// NewAuthority returns an Authority that signs and verifies HS256 under
// key alone, whose tokens name issuer.
func NewAuthority(key []byte, issuer string) *Authority {
	return &Authority{legacy: key, issuer: issuer, now: time.Now, keys: &KeySet{}}
}

// OpenAuthority returns an Authority over the key file keysPath (read
// again whenever it changes, so that a rotation or a retirement made by
// the command line reaches a running server) and the legacy HS256 key
// (nil for none).
func OpenAuthority(keysPath string, legacy []byte, issuer string) (*Authority, error) {
	a := &Authority{legacy: legacy, issuer: issuer, now: time.Now, keysPath: keysPath}
	// Watched before the first reading, so that no change after it is missed.
	if a.watch = newKeyWatch(keysPath); a.watch != nil {
		runtime.AddCleanup(a, (*keyWatch).close, a.watch)
	}
	if _, err := a.keySet(); err != nil {
		return nil, err
	}
	return a, nil
}

// keySet returns the current key set, reading the file again when its
// modification time or size changed. Where the key file's folder is
// watched (keywatch_linux.go), the stamp is read only after the watch saw
// an event for the file.
func (a *Authority) keySet() (*KeySet, error) {
	if a.keysPath == "" {
		a.mu.Lock()
		defer a.mu.Unlock()
		return a.keys, nil
	}
	if a.watch != nil { // set when made, never changed
		// Under the lock: a request that finds the queue drained by
		// another waits for that one's reading of the file.
		a.mu.Lock()
		defer a.mu.Unlock()
		if changed, err := a.watch.changed(); err == nil && !changed && a.keys != nil {
			return a.keys, nil
		}
		if li, err := os.Lstat(a.keysPath); err == nil && li.Mode()&os.ModeSymlink != 0 {
			a.watch.close() // its target changes elsewhere: the stamp on every request
		}
		fi, err := os.Stat(a.keysPath)
		return a.loadKeys(fi, err)
	}
	fi, err := os.Stat(a.keysPath) // outside the lock: requests do not queue on the syscall
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.loadKeys(fi, err)
}

// loadKeys reads the key file again unless its stamp (fi, or statErr) is
// the one read last; a.mu held.
func (a *Authority) loadKeys(fi os.FileInfo, statErr error) (*KeySet, error) {
	if statErr == nil && a.keys != nil && fi.ModTime().Equal(a.stamp) && fi.Size() == a.size {
		return a.keys, nil
	}
	ks, err := LoadKeySet(a.keysPath)
	if err != nil {
		return nil, err
	}
	a.keys = ks
	if fi != nil {
		a.stamp, a.size = fi.ModTime(), fi.Size()
	}
	return ks, nil
}

// Keys returns a copy of the current key set.
func (a *Authority) Keys() (KeySet, error) {
	ks, err := a.keySet()
	if err != nil {
		return KeySet{}, err
	}
	return *ks, nil
}

// HasLegacy reports whether an HS256 key is configured and not retired.
func (a *Authority) HasLegacy() bool {
	ks, err := a.keySet()
	return err == nil && a.legacy != nil && ks.LegacyRetired == nil
}

// Issuer returns the iss claim of this authority's tokens.
func (a *Authority) Issuer() string { return a.issuer }

// maxTTL is the longest lifetime of a role's tokens.
func (a *Authority) maxTTL(role string) time.Duration {
	if d, ok := a.MaxTTL[role]; ok && d > 0 {
		return d
	}
	return DefaultMaxTTL[role]
}

// ErrTTLTooLong means a token was asked for longer than its role's
// maximum lifetime.
var ErrTTLTooLong = errors.New("ttl above the maximum token lifetime")

// Issue signs a token for g. It checks that the role's scope is given:
// curator and member need a project; partner needs at least one dataset.
// It signs with EdDSA under the newest key not retired, naming it by kid;
// with no such key, with the legacy HS256 key.
func (a *Authority) Issue(g Grant) (string, error) {
	tok, _, err := a.IssueClaims(g)
	return tok, err
}

// IssueClaims is Issue, returning the claims signed as well.
func (a *Authority) IssueClaims(g Grant) (string, *Claims, error) {
	if !slices.Contains(Roles, g.Role) {
		return "", nil, fmt.Errorf("token: role %q: want one of %s", g.Role, strings.Join(Roles, ", "))
	}
	if g.Subject == "" {
		return "", nil, fmt.Errorf("token: a subject is required")
	}
	switch g.Role {
	case RoleCurator, RoleMember:
		if g.Project == "" {
			return "", nil, fmt.Errorf("token: role %s needs a project", g.Role)
		}
	case RolePartner:
		if len(g.Datasets) == 0 {
			return "", nil, fmt.Errorf("token: role partner needs at least one dataset (project/dataset)")
		}
		for _, d := range g.Datasets {
			if p, n, ok := strings.Cut(d, "/"); !ok || p == "" || n == "" || strings.Contains(n, "/") {
				return "", nil, fmt.Errorf("token: dataset %q: want project/dataset", d)
			}
		}
	}
	if len(g.Sites) > 0 && g.Role != RolePartner {
		return "", nil, fmt.Errorf("token: sites bind partner tokens only, not role %s", g.Role)
	}
	if g.Replace && (g.Role != RolePartner || len(g.Sites) == 0) {
		return "", nil, fmt.Errorf("token: replace is granted to partner tokens bound to sites only (give its sites)")
	}
	for _, site := range g.Sites {
		if site == "" || len(site) > 200 {
			return "", nil, fmt.Errorf("token: site %q: want 1 to 200 bytes", site)
		}
	}
	if g.TTL <= 0 {
		return "", nil, fmt.Errorf("token: ttl must be positive")
	}
	if max := a.maxTTL(g.Role); g.TTL > max {
		return "", nil, fmt.Errorf("token: ttl %s: %w of role %s, %s (max_ttl)", g.TTL, ErrTTLTooLong, g.Role, max)
	}
	ks, err := a.keySet()
	if err != nil {
		return "", nil, err
	}
	now := a.now().Truncate(time.Second)
	c := &Claims{
		RegisteredClaims: jwt.RegisteredClaims{
			Issuer:    a.issuer,
			Subject:   g.Subject,
			Audience:  jwt.ClaimStrings{Audience},
			ExpiresAt: jwt.NewNumericDate(now.Add(g.TTL)),
			IssuedAt:  jwt.NewNumericDate(now),
			NotBefore: jwt.NewNumericDate(now),
			ID:        newTokenID(),
		},
		Role:     g.Role,
		Project:  g.Project,
		Datasets: g.Datasets,
		Sites:    g.Sites,
		Replace:  g.Replace,
	}
	if k, ok := ks.Active(); ok {
		priv, err := k.private()
		if err != nil {
			return "", nil, err
		}
		t := jwt.NewWithClaims(jwt.SigningMethodEdDSA, c)
		t.Header["kid"] = k.KID
		s, err := t.SignedString(priv)
		return s, c, err
	}
	if a.legacy == nil || ks.LegacyRetired != nil {
		return "", nil, fmt.Errorf("token: no signing key: run flowcat token rotate")
	}
	s, err := jwt.NewWithClaims(jwt.SigningMethodHS256, c).SignedString(a.legacy)
	return s, c, err
}

// checkJOSE applies the rules the JWT library leaves to the application:
// a "crit" header is refused, since flowcat understands no extension
// (RFC 7515 section 4.1.11: a recipient that does not understand a listed
// extension must reject the JWS), and exp, nbf and iat, when present, must
// be JSON numbers (RFC 7519 sections 4.1.4-4.1.6: a NumericDate), not
// strings holding one.
func checkJOSE(token string) error {
	parts := strings.Split(token, ".")
	if len(parts) != 3 {
		return fmt.Errorf("token is not three dot-separated parts")
	}
	hb, err := base64.RawURLEncoding.DecodeString(parts[0])
	if err != nil {
		return fmt.Errorf("header is not base64url")
	}
	var hdr map[string]json.RawMessage
	if err := json.Unmarshal(hb, &hdr); err != nil {
		return fmt.Errorf("header is not a JSON object")
	}
	if crit, ok := hdr["crit"]; ok {
		return fmt.Errorf("header crit %s: no extension is understood (RFC 7515 section 4.1.11)", crit)
	}
	pb, err := base64.RawURLEncoding.DecodeString(parts[1])
	if err != nil {
		return fmt.Errorf("payload is not base64url")
	}
	var pl map[string]json.RawMessage
	if err := json.Unmarshal(pb, &pl); err != nil {
		return fmt.Errorf("payload is not a JSON object")
	}
	for _, name := range []string{"exp", "nbf", "iat"} {
		v, ok := pl[name]
		if !ok {
			continue
		}
		d := json.NewDecoder(bytes.NewReader(v))
		d.UseNumber()
		var x any
		if err := d.Decode(&x); err != nil {
			return fmt.Errorf("claim %s is not JSON", name)
		}
		if _, ok := x.(json.Number); !ok {
			return fmt.Errorf("claim %s is not a number (RFC 7519 section 4.1.4: a NumericDate)", name)
		}
	}
	return nil
}

// Verify checks a token: the header (no crit), its algorithm (EdDSA under
// a key of the set named by kid and not retired, or HS256 under the legacy
// key while it is not retired; "none" and every other algorithm are
// refused, RFC 8725 section 3.1), the issuer, audience, expiry, issue time
// (within ClockSkew), NumericDate types, and the presence of sub and jti.
// Every failure wraps ErrUnauthorized.
func (a *Authority) Verify(token string) (*Claims, error) {
	ks, err := a.keySet()
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrUnauthorized, err)
	}
	if c, ok := a.remembered(ks, token); ok {
		// The same bytes passed checkJOSE and the signature before; the
		// times are checked again.
		if err := a.claimValidator().Validate(c); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrUnauthorized, err)
		}
		return c, nil
	}
	if err := checkJOSE(token); err != nil {
		return nil, fmt.Errorf("%w: %w", ErrUnauthorized, err)
	}
	var c Claims
	rules := append(a.claimRules(), jwt.WithValidMethods([]string{jwt.SigningMethodEdDSA.Alg(), jwt.SigningMethodHS256.Alg()}))
	t, err := jwt.ParseWithClaims(token, &c, func(t *jwt.Token) (any, error) { return a.verifyKey(ks, t) }, rules...)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrUnauthorized, err)
	}
	if c.Subject == "" || c.ID == "" || c.IssuedAt == nil {
		return nil, fmt.Errorf("%w: token lacks sub, jti or iat", ErrUnauthorized)
	}
	if !slices.Contains(Roles, c.Role) {
		return nil, fmt.Errorf("%w: unknown role %q", ErrUnauthorized, c.Role)
	}
	c.kid, _ = t.Header["kid"].(string)
	a.remember(ks, token, &c)
	return &c, nil
}

// claimRules are the checks of a token's claims: issuer, audience,
// expiry (required), issue time, each within ClockSkew. They run on every
// request, whether or not the signature was checked before.
func (a *Authority) claimRules() []jwt.ParserOption {
	return []jwt.ParserOption{
		jwt.WithIssuer(a.issuer),
		jwt.WithAudience(Audience),
		jwt.WithExpirationRequired(),
		jwt.WithIssuedAt(),
		jwt.WithTimeFunc(func() time.Time { return a.now() }),
		jwt.WithLeeway(ClockSkew),
	}
}

// claimValidator is claimRules as one validator, made on first use (a
// validator only reads its settings, so requests share it).
func (a *Authority) claimValidator() *jwt.Validator {
	a.validOnce.Do(func() { a.valid = jwt.NewValidator(a.claimRules()...) })
	return a.valid
}

// verifiedTokens bounds how many tokens an Authority remembers as
// verified (least recently used first out). A token is a few hundred
// bytes, so the memory is under a few MiB.
const verifiedTokens = 4096

// verified is a token whose header, algorithm, key and signature passed,
// under the key set ks.
type verified struct {
	ks     *KeySet
	claims Claims
}

// remembered returns a copy of the claims of token if these exact bytes
// were verified under the current key set ks and their key still
// verifies. A signature check (Ed25519) costs far more than the rest of a
// request for a stored summary; the claims' times are checked again by the
// caller on every request. The memory holds tokens in process memory only.
func (a *Authority) remembered(ks *KeySet, token string) (*Claims, bool) {
	v, ok := a.verifiedMemory().Get(token)
	if !ok || v.ks != ks || !a.stillVerifies(ks, v.claims.kid) {
		return nil, false
	}
	c := v.claims
	return &c, true
}

func (a *Authority) remember(ks *KeySet, token string, c *Claims) {
	a.verifiedMemory().Add(token, verified{ks: ks, claims: *c})
}

// verifiedMemory is the memory of verified tokens, made on first use.
func (a *Authority) verifiedMemory() *lru.Cache[string, verified] {
	a.seenOnce.Do(func() { a.seen, _ = lru.New[string, verified](verifiedTokens) })
	return a.seen
}

// stillVerifies reports whether the key named kid ("" for the legacy
// HS256 key) is in ks and not retired.
func (a *Authority) stillVerifies(ks *KeySet, kid string) bool {
	if kid == "" {
		return a.legacy != nil && ks.LegacyRetired == nil
	}
	for _, k := range ks.Keys {
		if k.KID == kid {
			return k.RetiredAt == nil
		}
	}
	return false
}

// verifyKey picks the key for t by its algorithm and kid, so that a key
// of one type is never used under another algorithm (RFC 8725 section
// 2.1).
func (a *Authority) verifyKey(ks *KeySet, t *jwt.Token) (any, error) {
	kid, _ := t.Header["kid"].(string)
	switch t.Method.Alg() {
	case jwt.SigningMethodEdDSA.Alg():
		if kid == "" {
			return nil, fmt.Errorf("EdDSA token without kid")
		}
		for _, k := range ks.Keys {
			if k.KID != kid {
				continue
			}
			if k.RetiredAt != nil {
				return nil, fmt.Errorf("key %s was retired", kid)
			}
			priv, err := k.private()
			if err != nil {
				return nil, err
			}
			return priv.Public(), nil
		}
		return nil, fmt.Errorf("unknown key %q", kid)
	case jwt.SigningMethodHS256.Alg():
		if a.legacy == nil {
			return nil, fmt.Errorf("HS256 is not accepted here")
		}
		if ks.LegacyRetired != nil {
			return nil, fmt.Errorf("the HS256 key was retired")
		}
		if _, has := t.Header["kid"]; has {
			return nil, fmt.Errorf("HS256 token with a kid")
		}
		return a.legacy, nil
	}
	return nil, fmt.Errorf("algorithm %s not accepted", t.Method.Alg())
}

// CanRead reports whether the claims may read project's datasets and
// versions.
func (c *Claims) CanRead(project string) bool {
	switch c.Role {
	case RoleAdmin:
		return true
	case RoleCurator, RoleMember:
		return c.Project == project
	}
	return false
}

// CanCurate reports whether the claims may manage project.
func (c *Claims) CanCurate(project string) bool {
	return c.Role == RoleAdmin || (c.Role == RoleCurator && c.Project == project)
}

// CanUpload reports whether the claims may upload to project/dataset.
func (c *Claims) CanUpload(project, dataset string) bool {
	if c.CanCurate(project) {
		return true
	}
	return c.Role == RolePartner && slices.Contains(c.Datasets, project+"/"+dataset)
}

// uploadsTo reports whether a partner's token names a dataset of project.
func (c *Claims) uploadsTo(project string) bool {
	if c.Role != RolePartner {
		return false
	}
	for _, d := range c.Datasets {
		if p, _, _ := strings.Cut(d, "/"); p == project {
			return true
		}
	}
	return false
}

// CanSeeDataset reports whether the claims may see a dataset's metadata
// and uploads (partners see the datasets they upload to).
func (c *Claims) CanSeeDataset(project, dataset string) bool {
	return c.CanRead(project) || c.CanUpload(project, dataset)
}

func newTokenID() string {
	var b [10]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic(err) // crypto/rand does not fail on supported platforms
	}
	return strings.ToLower(base32.StdEncoding.WithPadding(base32.NoPadding).EncodeToString(b[:]))
}

// GenerateSigningKeyFile writes a new random 256-bit signing key, as hex,
// to path with mode 0600; it fails if the file exists.
func GenerateSigningKeyFile(path string) error {
	key := make([]byte, 32)
	if _, err := rand.Read(key); err != nil {
		return fmt.Errorf("signing key: %w", err)
	}
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return fmt.Errorf("signing key: %w", err)
	}
	if _, err := fmt.Fprintln(f, hex.EncodeToString(key)); err != nil {
		f.Close()
		return fmt.Errorf("signing key: %w", err)
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return fmt.Errorf("signing key: %w", err)
	}
	return f.Close()
}

// LoadSigningKeyFile reads a key written by GenerateSigningKeyFile.
func LoadSigningKeyFile(path string) ([]byte, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("signing key: %w", err)
	}
	key, err := hex.DecodeString(strings.TrimSpace(string(b)))
	if err != nil || len(key) < 32 {
		return nil, fmt.Errorf("signing key: %s: want at least 64 hex digits", path)
	}
	return key, nil
}
