package catalog

import (
	"context"
	"fmt"
	"slices"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
)

// KeyChain returns the project's key generations, oldest first: its
// PriorKeys and its current Key.
func (p *Project) KeyChain() []anonymize.SealedKey {
	return append(slices.Clone(p.PriorKeys), p.Key)
}

// KeyGeneration returns the generation number (1 for the first) of the
// project key with id, 0 when it is none of the project's.
func (p *Project) KeyGeneration(id string) int {
	for i, k := range p.KeyChain() {
		if k.ID == id {
			return i + 1
		}
	}
	return 0
}

// KeyRotation is what a rotation of a project's pseudonym key did: the
// ids (never the keys) of the old and the new generation.
type KeyRotation struct {
	Project    string    `json:"project"`
	OldKeyID   string    `json:"old_key_id"`
	NewKeyID   string    `json:"new_key_id"`
	Generation int       `json:"generation"` // the new key's, 2 after the first rotation
	At         time.Time `json:"at"`
	By         string    `json:"by"`
}

// RotateProjectKey draws a new pseudonym key generation for project,
// sealed under the master key, and keeps the previous ones sealed beside
// it (Project.PriorKeys): a pseudonym of the new generation is the keyed
// image of the previous generation's (anonymize's chain), so no raw value
// is needed to carry stored data over. Data files are not touched here:
// the first version of each dataset made afterwards re-keys every file it
// carries (rekey.go), so a version never mixes generations, and its
// manifest names the new key id. An upload already reading when the key
// rotates fails at its commit and is to be sent again. The rotation is
// audited as key.project_rotate with both key ids. A deleted project
// fails with ErrNotFound.
func (s *Store) RotateProjectKey(ctx context.Context, project, by string) (*KeyRotation, error) {
	nk, err := anonymize.NewProjectKey(s.opt.Master, project)
	if err != nil {
		return nil, fmt.Errorf("project key rotation: %w", err)
	}
	var rot KeyRotation
	err = s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketProjects)
		var p Project
		if err := getJSON(b, []byte(project), &p, "project "+project); err != nil {
			return err
		}
		if p.Deleted != nil {
			return fmt.Errorf("project %s is deleted: %w", project, ErrNotFound)
		}
		// The chain must open under this master key before it grows.
		if _, err := anonymize.OpenKeyChain(s.opt.Master, p.Name, p.KeyChain()); err != nil {
			return err
		}
		rot = KeyRotation{Project: p.Name, OldKeyID: p.Key.ID, NewKeyID: nk.ID, Generation: len(p.PriorKeys) + 2, At: s.opt.Now().UTC(), By: by}
		p.PriorKeys = append(p.PriorKeys, p.Key)
		p.Key = nk
		if err := putJSON(b, []byte(p.Name), &p); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: rot.At, By: by, Action: "key.project_rotate", Project: p.Name,
			Target: "project " + p.Name, Outcome: OutcomeOK,
			Detail: fmt.Sprintf("pseudonym key %s (generation %d) replaced by %s (generation %d); each dataset's next version re-keys the files it carries",
				rot.OldKeyID, rot.Generation-1, rot.NewKeyID, rot.Generation)}))
	})
	if err != nil {
		return nil, fmt.Errorf("project key rotation: %w", err)
	}
	s.opt.Logger.Info("project key rotated", "project", project, "old_key", rot.OldKeyID, "new_key", rot.NewKeyID, "generation", rot.Generation)
	return &rot, nil
}

// KeySpan is a run of a dataset's versions made under one pseudonym key
// generation: their pseudonyms are linkable with each other (equal
// identifiers, equal pseudonyms) and with no version of another span.
type KeySpan struct {
	KeyID      string `json:"key_id"`
	Generation int    `json:"generation"` // 0 when the id is not the project's (not expected)
	Versions   []int  `json:"versions"`
}

// KeySpans groups the versions of a dataset by the key generation their
// manifests name, in version order; the dictionary states from it which
// versions are linkable. It reads every version's manifest.
func (s *Store) KeySpans(ctx context.Context, project, dataset string) ([]KeySpan, error) {
	p, err := s.Project(ctx, project)
	if err != nil {
		return nil, err
	}
	vs, err := s.Versions(ctx, project, dataset)
	if err != nil {
		return nil, err
	}
	var out []KeySpan
	for i := range vs {
		id := vs[i].Manifest.KeyID
		j := slices.IndexFunc(out, func(k KeySpan) bool { return k.KeyID == id })
		if j < 0 {
			out = append(out, KeySpan{KeyID: id, Generation: p.KeyGeneration(id)})
			j = len(out) - 1
		}
		out[j].Versions = append(out[j].Versions, vs[i].Number)
	}
	for i := range out {
		slices.Sort(out[i].Versions)
	}
	slices.SortFunc(out, func(a, b KeySpan) int { return a.Versions[0] - b.Versions[0] })
	return out, nil
}
