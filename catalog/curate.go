package catalog

import (
	"context"
	"errors"
	"fmt"
	"strings"

	bolt "go.etcd.io/bbolt"
)

// ErrRetracted is returned for the data of a retracted version; its
// metadata stays readable.
var ErrRetracted = errors.New("version retracted")

// ErrState is returned for a state change the version's state does not
// allow, such as publishing a retracted version.
var ErrState = errors.New("not allowed in this state")

// Publish makes a draft version visible to every member. Publishing a
// published version is a no-op; a retracted one fails with ErrState.
// A version whose disclosure risk is above the project's threshold fails
// with ErrRiskAboveThreshold (see PublishOverride).
func (s *Store) Publish(ctx context.Context, project, dataset string, n int, by string) (*Version, error) {
	return s.publish(ctx, project, dataset, n, by, nil)
}

func (s *Store) publish(ctx context.Context, project, dataset string, n int, by string, ov *RiskOverride) (*Version, error) {
	cur, err := s.Version(ctx, project, dataset, n)
	if err != nil {
		return nil, err
	}
	proj, err := s.Project(ctx, project)
	if err != nil {
		return nil, err
	}
	action := "version.publish"
	if ov != nil {
		action = "version.publish.override"
	}
	return s.setState(ctx, project, dataset, n, by, func(v *Version) (bool, error) {
		switch v.State {
		case StatePublished:
			return false, nil
		case StateDraft:
			if err := s.writableNow(project, dataset); err != nil {
				return false, err
			}
		case StateRetracted:
			return false, fmt.Errorf("version %d was retracted (%s); it cannot be published again: %w", v.Number, v.RetractReason, ErrState)
		}
		now := s.opt.Now().UTC()
		v.Manifest = cur.Manifest
		err := publishGate(v, proj.DisclosurePolicy().MaxRisk, ov, now)
		v.Manifest = nil
		if err != nil {
			return false, err
		}
		v.State, v.PublishedAt, v.PublishedBy = StatePublished, &now, by
		return true, nil
	}, action)
}

// Retract withdraws a version: it stays for audit, its metadata and
// citation stay readable, its data is no longer served. A reason is
// required; retracting twice fails with ErrState.
func (s *Store) Retract(ctx context.Context, project, dataset string, n int, reason, by string) (*Version, error) {
	reason = strings.TrimSpace(reason)
	if reason == "" {
		return nil, fmt.Errorf("retract: a reason is required: %w", ErrInvalid)
	}
	if len(reason) > 500 {
		return nil, fmt.Errorf("retract: reason longer than 500 bytes: %w", ErrInvalid)
	}
	return s.setState(ctx, project, dataset, n, by, func(v *Version) (bool, error) {
		if v.State == StateRetracted {
			return false, fmt.Errorf("version %d is retracted already: %w", v.Number, ErrState)
		}
		now := s.opt.Now().UTC()
		v.State, v.RetractedAt, v.RetractedBy, v.RetractReason = StateRetracted, &now, by, reason
		return true, nil
	}, "version.retract")
}

func (s *Store) setState(ctx context.Context, project, dataset string, n int, by string, change func(*Version) (bool, error), action string) (*Version, error) {
	ref := project + "/" + dataset
	var v Version
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketVersions)
		if err := getJSON(b, seqKey(ref, n), &v, fmt.Sprintf("version %s@%d", ref, n)); err != nil {
			return err
		}
		changed, err := change(&v)
		if err != nil {
			return err
		}
		if !changed {
			return s.withManifest(tx, &v)
		}
		if err := putVersion(tx, &v); err != nil {
			return err
		}
		if err := s.withManifest(tx, &v); err != nil {
			return err
		}
		return auditCtx(ctx, tx, s.opt.Now(), by, action, fmt.Sprintf("%s@%d", ref, n))
	})
	if err != nil {
		return nil, err
	}
	return &v, nil
}

// writableNow is writableTx in a read transaction of its own.
func (s *Store) writableNow(project, dataset string) error {
	return s.db.View(func(tx *bolt.Tx) error { return writableTx(tx, project, dataset) })
}
