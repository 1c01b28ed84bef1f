package catalog

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

var (
	bucketTokens      = []byte("tokens")      // jti -> TokenRecord
	bucketRevocations = []byte("revocations") // jti -> Revocation
)

// TokenRecord is what the catalog keeps of an issued API token: its claims,
// never the token itself (which would let anyone reading the file use it).
type TokenRecord struct {
	JTI       string    `json:"jti"`
	Subject   string    `json:"subject"`
	Role      string    `json:"role"`
	Project   string    `json:"project,omitempty"`
	Datasets  []string  `json:"datasets,omitempty"`
	Sites     []string  `json:"sites,omitempty"`   // a partner's bound sites
	Replace   bool      `json:"replace,omitempty"` // a partner may replace-window its sites
	KeyID     string    `json:"kid,omitempty"`     // "" for HS256
	IssuedAt  time.Time `json:"issued_at"`
	ExpiresAt time.Time `json:"expires_at"`
	// Revoked is filled in by Tokens from the revocations bucket.
	Revoked *Revocation `json:"revoked,omitempty"`
}

// Revocation records that a token (by jti) no longer authenticates.
type Revocation struct {
	JTI    string    `json:"jti"`
	At     time.Time `json:"at"`
	By     string    `json:"by"`
	Reason string    `json:"reason"`
}

// maxJTI bounds a jti given to Revoke.
const maxJTI = 128

// RecordToken stores an issued token's record and audits the issue.
func (s *Store) RecordToken(ctx context.Context, by string, r TokenRecord) error {
	if r.JTI == "" || len(r.JTI) > maxJTI {
		return fmt.Errorf("token record: jti empty or longer than %d bytes: %w", maxJTI, ErrInvalid)
	}
	return s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketTokens)
		if b.Get([]byte(r.JTI)) != nil {
			return fmt.Errorf("token %s: recorded already: %w", r.JTI, ErrExists)
		}
		r.Revoked = nil
		if err := putJSON(b, []byte(r.JTI), r); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: "token.issue", Project: r.project(),
			Target: "token " + r.JTI, Detail: "role " + r.Role + " for " + r.Subject + scopeText(r)}))
	})
}

// RevokeToken records that token jti no longer authenticates, and audits
// it. A reason is required (at most 500 bytes). A jti the catalog has no
// record of may be revoked (the token may have been issued while the
// catalog was held by a server); revoking twice keeps the first record.
func (s *Store) RevokeToken(ctx context.Context, by, jti, reason string) (Revocation, error) {
	if jti == "" || len(jti) > maxJTI {
		return Revocation{}, fmt.Errorf("revoke: jti empty or longer than %d bytes: %w", maxJTI, ErrInvalid)
	}
	if reason == "" {
		return Revocation{}, fmt.Errorf("revoke: a reason is required: %w", ErrInvalid)
	}
	if len(reason) > 500 {
		return Revocation{}, fmt.Errorf("revoke: reason longer than 500 bytes: %w", ErrInvalid)
	}
	var out Revocation
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketRevocations)
		if v := b.Get([]byte(jti)); v != nil {
			return getJSON(b, []byte(jti), &out, "revocation "+jti)
		}
		out = Revocation{JTI: jti, At: s.opt.Now().UTC(), By: by, Reason: reason}
		if err := putJSON(b, []byte(jti), out); err != nil {
			return err
		}
		var rec TokenRecord
		if v := tx.Bucket(bucketTokens).Get([]byte(jti)); v != nil {
			if err := json.Unmarshal(v, &rec); err != nil {
				return fmt.Errorf("token record %s: %w", jti, err)
			}
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: "token.revoke", Project: rec.project(),
			Target: "token " + jti, Detail: reason}))
	})
	return out, err
}

// TokenStanding reports, in one read, whether the catalog has a record of
// jti and whether jti was revoked (a revocation can exist without a
// record).
// Every authenticated request asks; the answer is kept until the next
// write (readMemo).
func (s *Store) TokenStanding(jti string) (recorded, revoked bool, err error) {
	at := s.db.readAt()
	if t, ok := s.standings.get(at, jti); ok {
		return t.recorded, t.revoked, nil
	}
	err = s.db.View(func(tx *bolt.Tx) error {
		recorded = tx.Bucket(bucketTokens).Get([]byte(jti)) != nil
		revoked = tx.Bucket(bucketRevocations).Get([]byte(jti)) != nil
		return nil
	})
	if err == nil {
		s.standings.put(at, jti, tokenStanding{recorded, revoked})
	}
	return recorded, revoked, err
}

// tokenStanding is what TokenStanding answers.
type tokenStanding struct{ recorded, revoked bool }

// memoStandings bounds the token standings a Store keeps.
const memoStandings = 4096

// Tokens lists the recorded tokens (by jti), each with its revocation if
// any, then the revocations of tokens the catalog has no record of.
func (s *Store) Tokens(ctx context.Context) ([]TokenRecord, error) {
	var out []TokenRecord
	err := s.db.View(func(tx *bolt.Tx) error {
		recs, err := scanJSON[TokenRecord](tx.Bucket(bucketTokens), nil)
		if err != nil {
			return err
		}
		revs, err := scanJSON[Revocation](tx.Bucket(bucketRevocations), nil)
		if err != nil {
			return err
		}
		byJTI := map[string]*Revocation{}
		for i := range revs {
			byJTI[revs[i].JTI] = &revs[i]
		}
		for _, r := range recs {
			r.Revoked = byJTI[r.JTI]
			delete(byJTI, r.JTI)
			out = append(out, r)
		}
		for _, rv := range revs {
			if byJTI[rv.JTI] != nil {
				out = append(out, TokenRecord{JTI: rv.JTI, Revoked: byJTI[rv.JTI]})
			}
		}
		return nil
	})
	return out, err
}

// AuditKeyChange audits a change of the token signing keys (action
// "key.rotate" or "key.retire", target the key id).
func (s *Store) AuditKeyChange(ctx context.Context, by, action, kid string) error {
	return s.db.Update(func(tx *bolt.Tx) error {
		return auditCtx(ctx, tx, s.opt.Now(), by, action, "key "+kid)
	})
}

// project is the one project a token's scope lies in: a curator's or
// member's project, the project of every dataset a partner's token names;
// "" for admins and for partners of datasets of several projects.
func (r TokenRecord) project() string {
	if r.Project != "" {
		return r.Project
	}
	p := ""
	for i, d := range r.Datasets {
		dp, _, _ := strings.Cut(d, "/")
		if i > 0 && dp != p {
			return ""
		}
		p = dp
	}
	return p
}

func scopeText(r TokenRecord) string {
	switch {
	case r.Project != "":
		return " in " + r.Project
	case len(r.Datasets) > 0 && len(r.Sites) > 0:
		s := " on " + strings.Join(r.Datasets, ",") + " for sites " + strings.Join(r.Sites, ",")
		if r.Replace {
			s += ", may replace-window them"
		}
		return s
	case len(r.Datasets) > 0:
		return " on " + strings.Join(r.Datasets, ",")
	}
	return ""
}

// Roles a curator manages the tokens of, within its project: members and
// partners (never curators or admins).
var curatorManaged = []string{"member", "partner"}

// ManagedBy reports whether a curator of project manages the token: a
// member token of project, or a partner token whose datasets all lie in
// project.
func (r TokenRecord) ManagedBy(project string) bool {
	if project == "" {
		return false
	}
	for _, role := range curatorManaged {
		if r.Role == role {
			return r.project() == project
		}
	}
	return false
}

// ProjectTokens lists the tokens a curator of project manages
// (TokenRecord.ManagedBy), each with its revocation if any.
func (s *Store) ProjectTokens(ctx context.Context, project string) ([]TokenRecord, error) {
	all, err := s.Tokens(ctx)
	if err != nil {
		return nil, err
	}
	out := []TokenRecord{}
	for _, r := range all {
		if r.ManagedBy(project) {
			out = append(out, r)
		}
	}
	return out, nil
}

// RevokeProjectToken revokes jti for a curator of project: the token must
// be one the curator manages; any other (another project's, a curator's or
// admin's, one without a record) is ErrNotFound, so that a curator learns
// nothing of tokens outside its project.
func (s *Store) RevokeProjectToken(ctx context.Context, by, project, jti, reason string) (Revocation, error) {
	var rec TokenRecord
	err := s.db.View(func(tx *bolt.Tx) error {
		return getJSON(tx.Bucket(bucketTokens), []byte(jti), &rec, "token "+jti)
	})
	if err != nil && !errors.Is(err, ErrNotFound) {
		return Revocation{}, err
	}
	if err != nil || !rec.ManagedBy(project) {
		return Revocation{}, fmt.Errorf("token %s: no member or partner token of project %s: %w", truncate(jti, maxJTI), project, ErrNotFound)
	}
	return s.RevokeToken(ctx, by, jti, reason)
}
