package catalog

import (
	"context"
	"fmt"
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
	KeyID     string    `json:"kid,omitempty"` // "" for HS256
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
		return audit(tx, s.opt.Now(), by, "token.issue", "token "+r.JTI+" role "+r.Role+" for "+r.Subject)
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
		return audit(tx, s.opt.Now(), by, "token.revoke", "token "+jti)
	})
	return out, err
}

// TokenRevoked reports whether jti was revoked.
func (s *Store) TokenRevoked(jti string) (bool, error) {
	var revoked bool
	err := s.db.View(func(tx *bolt.Tx) error {
		revoked = tx.Bucket(bucketRevocations).Get([]byte(jti)) != nil
		return nil
	})
	return revoked, err
}

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
		return audit(tx, s.opt.Now(), by, action, "key "+kid)
	})
}
