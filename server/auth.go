package server

import (
	"crypto/rand"
	"encoding/base32"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"slices"
	"strings"
	"time"

	"github.com/golang-jwt/jwt/v5"
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
}

// Grant is what a token is issued for.
type Grant struct {
	Role     string
	Subject  string
	Project  string
	Datasets []string
	TTL      time.Duration
}

// Authority issues and verifies HS256 tokens under one signing key.
type Authority struct {
	key    []byte
	issuer string
	now    func() time.Time
}

// NewAuthority returns an Authority for key, whose tokens name issuer.
func NewAuthority(key []byte, issuer string) *Authority {
	return &Authority{key: key, issuer: issuer, now: time.Now}
}

// Issuer returns the iss claim of this authority's tokens.
func (a *Authority) Issuer() string { return a.issuer }

// Issue signs a token for g. It checks that the role's scope is given:
// curator and member need a project; partner needs at least one dataset.
func (a *Authority) Issue(g Grant) (string, error) {
	if !slices.Contains(Roles, g.Role) {
		return "", fmt.Errorf("token: role %q: want one of %s", g.Role, strings.Join(Roles, ", "))
	}
	if g.Subject == "" {
		return "", fmt.Errorf("token: a subject is required")
	}
	switch g.Role {
	case RoleCurator, RoleMember:
		if g.Project == "" {
			return "", fmt.Errorf("token: role %s needs a project", g.Role)
		}
	case RolePartner:
		if len(g.Datasets) == 0 {
			return "", fmt.Errorf("token: role partner needs at least one dataset (project/dataset)")
		}
		for _, d := range g.Datasets {
			if p, n, ok := strings.Cut(d, "/"); !ok || p == "" || n == "" || strings.Contains(n, "/") {
				return "", fmt.Errorf("token: dataset %q: want project/dataset", d)
			}
		}
	}
	if g.TTL <= 0 {
		return "", fmt.Errorf("token: ttl must be positive")
	}
	now := a.now().Truncate(time.Second)
	c := Claims{
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
	}
	return jwt.NewWithClaims(jwt.SigningMethodHS256, c).SignedString(a.key)
}

// Verify checks a token's signature (HS256 only; "none" and every other
// algorithm are refused), issuer, audience, expiry, issue time and the
// presence of sub and jti. Every failure wraps ErrUnauthorized.
func (a *Authority) Verify(token string) (*Claims, error) {
	var c Claims
	_, err := jwt.ParseWithClaims(token, &c, func(*jwt.Token) (any, error) { return a.key, nil },
		jwt.WithValidMethods([]string{jwt.SigningMethodHS256.Alg()}),
		jwt.WithIssuer(a.issuer),
		jwt.WithAudience(Audience),
		jwt.WithExpirationRequired(),
		jwt.WithIssuedAt(),
		jwt.WithTimeFunc(a.now),
		jwt.WithLeeway(30*time.Second),
	)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrUnauthorized, err)
	}
	if c.Subject == "" || c.ID == "" || c.IssuedAt == nil {
		return nil, fmt.Errorf("%w: token lacks sub, jti or iat", ErrUnauthorized)
	}
	if !slices.Contains(Roles, c.Role) {
		return nil, fmt.Errorf("%w: unknown role %q", ErrUnauthorized, c.Role)
	}
	return &c, nil
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
