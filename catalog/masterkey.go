package catalog

import (
	"context"
	"fmt"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
)

// RotateMasterKey re-seals every project key, every generation of it
// (deleted projects' too),
// under newMaster, in one transaction, and records newMaster's id as the
// catalog's: the project keys, their ids and so every pseudonym stay the
// same, and no data file is touched. From then on the catalog opens only
// under newMaster. It is meant for a catalog no upload is using (the
// command line opens it with the server stopped). It returns how many
// project keys it re-sealed.
func (s *Store) RotateMasterKey(ctx context.Context, newMaster anonymize.MasterKey, by string) (int, error) {
	if newMaster.IsZero() {
		return 0, fmt.Errorf("master key rotation: no new key: %w", ErrInvalid)
	}
	if newMaster.ID() == s.opt.Master.ID() {
		return 0, fmt.Errorf("master key rotation: the new key is the current one: %w", ErrInvalid)
	}
	n := 0
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketProjects)
		ps, err := scanJSON[Project](b, nil)
		if err != nil {
			return err
		}
		for _, p := range ps {
			sk, err := anonymize.ResealProjectKey(s.opt.Master, newMaster, p.Name, p.Key)
			if err != nil {
				return fmt.Errorf("project %s: %w", p.Name, err)
			}
			p.Key = sk
			// Earlier generations are re-sealed too: new uploads need them.
			for i, old := range p.PriorKeys {
				if p.PriorKeys[i], err = anonymize.ResealProjectKey(s.opt.Master, newMaster, p.Name, old); err != nil {
					return fmt.Errorf("project %s, key %s: %w", p.Name, old.ID, err)
				}
			}
			if err := putJSON(b, []byte(p.Name), &p); err != nil {
				return err
			}
			n++
		}
		if err := tx.Bucket(bucketMeta).Put([]byte("master_key_id"), []byte(newMaster.ID())); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: "key.master_rotate",
			Target: "master key " + newMaster.ID(), Detail: fmt.Sprintf("from master key %s; %d project keys re-sealed, their ids and pseudonyms unchanged", s.opt.Master.ID(), n)}))
	})
	if err != nil {
		return 0, fmt.Errorf("master key rotation: %w", err)
	}
	s.opt.Master = newMaster
	s.opt.Logger.Info("master key rotated", "projects", n, "master_key", newMaster.ID())
	return n, nil
}
