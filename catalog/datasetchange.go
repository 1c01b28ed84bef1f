package catalog

import (
	"context"
	"fmt"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Datasets and projects change after creation: a dataset's title,
// description, threshold, window and profile are edited (a profile change
// makes a new profile revision, which applies to uploads that start
// after it; each version's manifest names the revision its upload was
// read with); datasets and projects are archived (read-only, hidden from
// lists, every version still readable and pullable) and deleted.
//
// Deleting keeps the record as a tombstone: the name is not reused, every
// version not yet retracted is retracted with the deletion's reason (so
// its metadata and citation still resolve, and its data answers 410 Gone
// with the reason), and the garbage collector removes the files no
// remaining version of a live dataset needs. A dataset that ever had a
// published version (which someone may have cited) is deleted by an
// admin only, with a reason; one that never published anything by its
// curators too.

// bucketProfiles holds each dataset's profile revisions, keyed by
// seqKey(ref, revision).
var bucketProfiles = []byte("profile_revisions")

// ProfileRevision is one revision of a dataset's mapping profile.
type ProfileRevision struct {
	Dataset     DatasetRef `json:"dataset"`
	Revision    int        `json:"revision"`
	Profile     string     `json:"profile"` // YAML as given; empty for the default profile
	Timezone    string     `json:"timezone"`
	ProfileHash string     `json:"profile_hash"`
	At          time.Time  `json:"at"`
	By          string     `json:"by"`
}

// maxReason bounds the reason of an archive or delete.
const maxReason = 500

func checkReason(what, reason string, required bool) (string, error) {
	reason = strings.TrimSpace(reason)
	if required && reason == "" {
		return "", fmt.Errorf("%s: a reason is required: %w", what, ErrInvalid)
	}
	if len(reason) > maxReason {
		return "", fmt.Errorf("%s: reason longer than %d bytes: %w", what, maxReason, ErrInvalid)
	}
	return reason, nil
}

// writable fails with ErrState when the dataset takes no uploads or
// changes: it, or its project, is archived or deleted.
func (d *Dataset) writable(p *Project) error {
	switch {
	case d.Deleted != nil:
		return fmt.Errorf("dataset %s was deleted (%s): %w", d.Ref(), d.Deleted.Reason, ErrState)
	case d.Archived != nil:
		return fmt.Errorf("dataset %s is archived, read-only: a curator unarchives it first: %w", d.Ref(), ErrState)
	case p != nil && p.Deleted != nil:
		return fmt.Errorf("project %s was deleted (%s): %w", p.Name, p.Deleted.Reason, ErrState)
	case p != nil && p.Archived != nil:
		return fmt.Errorf("project %s is archived, read-only: an admin unarchives it first: %w", p.Name, ErrState)
	}
	return nil
}

// writableTx is writable for the stored records of project/dataset.
func writableTx(tx *bolt.Tx, project, dataset string) error {
	var p Project
	if err := getJSON(tx.Bucket(bucketProjects), []byte(project), &p, "project "+project); err != nil {
		return err
	}
	var d Dataset
	ref := project + "/" + dataset
	if err := getJSON(tx.Bucket(bucketDatasets), []byte(ref), &d, "dataset "+ref); err != nil {
		return err
	}
	return d.writable(&p)
}

// DatasetEdit is a change to a dataset; nil fields stay as they are.
type DatasetEdit struct {
	Title       *string
	Description *string
	RejectAbove *float64
	// WindowFrom and WindowTo replace the declared window; ClearWindow
	// removes it.
	WindowFrom, WindowTo *time.Time
	ClearWindow          bool
	// Profile (YAML; "" for the default profile) and Timezone make a new
	// profile revision when the effective profile changes. A new profile
	// given without a zone takes its own zone.
	Profile  *string
	Timezone *string
}

// EditDataset applies e to a dataset and audits it ("dataset.edit",
// naming the fields changed). Uploads that start after it use the new
// values; versions made before keep what they were made with. It fails
// with ErrInvalid for a bad value, ErrState on an archived or deleted
// dataset, ErrNotFound for none.
func (s *Store) EditDataset(ctx context.Context, project, name string, e DatasetEdit, by string) (*Dataset, error) {
	if e.Title != nil && len(*e.Title) > 300 {
		return nil, fmt.Errorf("title longer than 300 bytes: %w", ErrInvalid)
	}
	if e.Description != nil && len(*e.Description) > 4000 {
		return nil, fmt.Errorf("description longer than 4000 bytes: %w", ErrInvalid)
	}
	if r := e.RejectAbove; r != nil && !(*r >= 0 && *r <= 1) {
		return nil, fmt.Errorf("reject-above %v: want a share between 0 and 1: %w", *r, ErrInvalid)
	}
	if e.ClearWindow && (e.WindowFrom != nil || e.WindowTo != nil) {
		return nil, fmt.Errorf("window: clear it or set it, not both: %w", ErrInvalid)
	}
	ref := project + "/" + name
	var d Dataset
	var rev *ProfileRevision
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketDatasets)
		if err := getJSON(b, []byte(ref), &d, "dataset "+ref); err != nil {
			return err
		}
		if err := writableTx(tx, project, name); err != nil {
			return err
		}
		var changed []string
		if e.Title != nil && *e.Title != d.Title {
			d.Title = *e.Title
			changed = append(changed, "title")
		}
		if e.Description != nil && *e.Description != d.Description {
			d.Description = *e.Description
			changed = append(changed, "description")
		}
		if e.RejectAbove != nil && *e.RejectAbove != d.RejectAbove {
			changed = append(changed, fmt.Sprintf("reject_above %v -> %v", d.RejectAbove, *e.RejectAbove))
			d.RejectAbove = *e.RejectAbove
		}
		if e.ClearWindow && (d.WindowFrom != nil || d.WindowTo != nil) {
			d.WindowFrom, d.WindowTo = nil, nil
			changed = append(changed, "window cleared")
		}
		if e.WindowFrom != nil || e.WindowTo != nil {
			from, to := d.WindowFrom, d.WindowTo
			if e.WindowFrom != nil {
				from = utcPtr(e.WindowFrom)
			}
			if e.WindowTo != nil {
				to = utcPtr(e.WindowTo)
			}
			if from != nil && to != nil && !to.After(*from) {
				return fmt.Errorf("window: from is not before to: %w", ErrInvalid)
			}
			d.WindowFrom, d.WindowTo = from, to
			changed = append(changed, "window")
		}
		if e.Profile != nil || e.Timezone != nil {
			yaml, zone := d.Profile, d.Timezone
			if e.Profile != nil {
				yaml, zone = *e.Profile, ""
			}
			if e.Timezone != nil {
				zone = *e.Timezone
			}
			prof, err := effectiveProfile([]byte(yaml), zone)
			if err != nil {
				return fmt.Errorf("%w: %w", err, ErrInvalid)
			}
			if prof.Hash() != d.ProfileHash || prof.Location().String() != d.Timezone {
				pb := tx.Bucket(bucketProfiles)
				if pb.Get(seqKey(ref, d.Revision())) == nil { // a dataset made before revisions were kept
					if err := putJSON(pb, seqKey(ref, d.Revision()), profileRevision(&d, d.CreatedAt, d.CreatedBy)); err != nil {
						return err
					}
				}
				d.ProfileRevision = d.Revision() + 1
				d.Profile, d.ProfileHash, d.Timezone = yaml, prof.Hash(), prof.Location().String()
				r := profileRevision(&d, s.opt.Now().UTC(), by)
				rev = &r
				if err := putJSON(pb, seqKey(ref, d.ProfileRevision), r); err != nil {
					return err
				}
				changed = append(changed, fmt.Sprintf("profile revision %d", d.ProfileRevision))
			}
		}
		if len(changed) == 0 {
			return nil
		}
		if err := putJSON(b, []byte(ref), &d); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: "dataset.edit", Project: project, Dataset: name,
			Target: ref, Detail: strings.Join(changed, "; ")}))
	})
	if err != nil {
		return nil, err
	}
	if rev != nil {
		s.opt.Logger.Info("dataset profile revised", "dataset", ref, "revision", rev.Revision, "by", by)
	}
	return &d, nil
}

func profileRevision(d *Dataset, at time.Time, by string) ProfileRevision {
	return ProfileRevision{Dataset: d.Ref(), Revision: d.Revision(), Profile: d.Profile, Timezone: d.Timezone, ProfileHash: d.ProfileHash, At: at.UTC(), By: by}
}

// ProfileRevisions lists a dataset's profile revisions, oldest first.
func (s *Store) ProfileRevisions(ctx context.Context, project, name string) ([]ProfileRevision, error) {
	d, err := s.Dataset(ctx, project, name)
	if err != nil {
		return nil, err
	}
	revs, err := listOfDataset[ProfileRevision](s, bucketProfiles, project, name)
	if err != nil {
		return nil, err
	}
	if len(revs) == 0 { // made before revisions were kept, never edited
		revs = []ProfileRevision{profileRevision(d, d.CreatedAt, d.CreatedBy)}
	}
	return revs, nil
}

// VersionProfile returns the profile revision version v (with its
// manifest) was read with.
func (s *Store) VersionProfile(ctx context.Context, v *Version) (ProfileRevision, error) {
	n := 1
	if v.Manifest != nil && v.Manifest.ProfileRevision > 0 {
		n = v.Manifest.ProfileRevision
	}
	revs, err := s.ProfileRevisions(ctx, v.Dataset.Project, v.Dataset.Name)
	if err != nil {
		return ProfileRevision{}, err
	}
	for _, r := range revs {
		if r.Revision == n {
			return r, nil
		}
	}
	return ProfileRevision{}, fmt.Errorf("profile revision %d of %s: %w", n, v.Dataset, ErrNotFound)
}

// DatasetAsRead returns the dataset of version v (with its manifest) with
// the profile, zone, hash and revision v was read with, for documents
// that describe v (its data dictionary).
func (s *Store) DatasetAsRead(ctx context.Context, v *Version) (*Dataset, error) {
	d, err := s.Dataset(ctx, v.Dataset.Project, v.Dataset.Name)
	if err != nil {
		return nil, err
	}
	pr, err := s.VersionProfile(ctx, v)
	if err != nil {
		return nil, err
	}
	d.Profile, d.Timezone, d.ProfileHash, d.ProfileRevision = pr.Profile, pr.Timezone, pr.ProfileHash, pr.Revision
	return d, nil
}

// ArchiveDataset makes a dataset read-only and hides it from lists; its
// versions stay readable and pullable. Archiving an archived dataset
// fails with ErrState.
func (s *Store) ArchiveDataset(ctx context.Context, project, name, reason, by string) (*Dataset, error) {
	reason, err := checkReason("archive", reason, false)
	if err != nil {
		return nil, err
	}
	return s.markDataset(ctx, project, name, by, "dataset.archive", reason, func(d *Dataset) error {
		if err := d.writable(nil); err != nil {
			return err
		}
		d.Archived = &Mark{At: s.opt.Now().UTC(), By: by, Reason: reason}
		return nil
	})
}

// UnarchiveDataset makes an archived dataset writable again.
func (s *Store) UnarchiveDataset(ctx context.Context, project, name, by string) (*Dataset, error) {
	return s.markDataset(ctx, project, name, by, "dataset.unarchive", "", func(d *Dataset) error {
		if d.Deleted != nil {
			return d.writable(nil)
		}
		if d.Archived == nil {
			return fmt.Errorf("dataset %s is not archived: %w", d.Ref(), ErrState)
		}
		d.Archived = nil
		return nil
	})
}

func (s *Store) markDataset(ctx context.Context, project, name, by, action, detail string, change func(*Dataset) error) (*Dataset, error) {
	ref := project + "/" + name
	var d Dataset
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketDatasets)
		if err := getJSON(b, []byte(ref), &d, "dataset "+ref); err != nil {
			return err
		}
		if err := change(&d); err != nil {
			return err
		}
		if err := putJSON(b, []byte(ref), &d); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: action, Project: project, Dataset: name, Target: ref, Detail: detail}))
	})
	if err != nil {
		return nil, err
	}
	return &d, nil
}

// Deletion says what deleting a dataset did.
type Deletion struct {
	Dataset   DatasetRef `json:"dataset"`
	Deleted   Mark       `json:"deleted"`
	Retracted []int      `json:"retracted_versions"` // versions retracted by the deletion
	// Published lists the versions that had been published (and may
	// have been cited): their metadata and citation stay readable.
	Published []int `json:"published_versions"`
}

// DeleteDataset deletes a dataset (see the comment at the top of this
// file): a reason is required; a dataset with a version that was ever
// published needs admin. The files go at the next garbage collection
// (CollectGarbage) unless a live dataset's version lists them too.
func (s *Store) DeleteDataset(ctx context.Context, project, name, reason, by string, admin bool) (*Deletion, error) {
	reason, err := checkReason("delete", reason, true)
	if err != nil {
		return nil, err
	}
	var del *Deletion
	err = s.db.Update(func(tx *bolt.Tx) (err error) {
		del, err = s.deleteDataset(ctx, tx, project+"/"+name, reason, by, admin)
		return err
	})
	if err != nil {
		return nil, err
	}
	s.opt.Logger.Info("dataset deleted", "dataset", project+"/"+name, "by", by, "retracted", len(del.Retracted))
	return del, nil
}

func (s *Store) deleteDataset(ctx context.Context, tx *bolt.Tx, ref, reason, by string, admin bool) (*Deletion, error) {
	b := tx.Bucket(bucketDatasets)
	var d Dataset
	if err := getJSON(b, []byte(ref), &d, "dataset "+ref); err != nil {
		return nil, err
	}
	if d.Deleted != nil {
		return nil, fmt.Errorf("dataset %s was deleted already: %w", ref, ErrState)
	}
	vs, err := scanJSON[Version](tx.Bucket(bucketVersions), []byte(ref+"/"))
	if err != nil {
		return nil, err
	}
	now := s.opt.Now().UTC()
	del := &Deletion{Dataset: d.Ref(), Deleted: Mark{At: now, By: by, Reason: reason}, Retracted: []int{}, Published: []int{}}
	for _, v := range vs {
		if v.PublishedAt != nil {
			del.Published = append(del.Published, v.Number)
		}
	}
	if len(del.Published) > 0 && !admin {
		return nil, fmt.Errorf("dataset %s has published versions %v, which may have been cited: only an admin deletes it, with a reason: %w", ref, del.Published, ErrState)
	}
	for i := range vs {
		v := &vs[i]
		if v.State == StateRetracted {
			continue
		}
		v.State, v.RetractedAt, v.RetractedBy, v.RetractReason = StateRetracted, &now, by, "dataset deleted: "+reason
		if err := putVersion(tx, v); err != nil {
			return nil, err
		}
		del.Retracted = append(del.Retracted, v.Number)
	}
	d.Deleted = &del.Deleted
	if err := putJSON(b, []byte(ref), &d); err != nil {
		return nil, err
	}
	return del, appendAudit(tx, withActor(ctx, AuditEntry{At: now, By: by, Action: "dataset.delete", Project: d.Project, Dataset: d.Name, Target: ref,
		Detail: fmt.Sprintf("%s; retracted versions %v; published versions %v", reason, del.Retracted, del.Published)}))
}

// EditProject sets a project's title.
func (s *Store) EditProject(ctx context.Context, name, title, by string) (*Project, error) {
	if len(title) > 300 {
		return nil, fmt.Errorf("title longer than 300 bytes: %w", ErrInvalid)
	}
	return s.markProject(ctx, name, by, "project.edit", "title", func(p *Project) error {
		if p.Deleted != nil || p.Archived != nil {
			return fmt.Errorf("project %s is archived or deleted: %w", name, ErrState)
		}
		p.Title = title
		return nil
	})
}

// ArchiveProject makes a project read-only (its datasets take no uploads
// or changes) and hides it from lists.
func (s *Store) ArchiveProject(ctx context.Context, name, reason, by string) (*Project, error) {
	reason, err := checkReason("archive", reason, false)
	if err != nil {
		return nil, err
	}
	return s.markProject(ctx, name, by, "project.archive", reason, func(p *Project) error {
		if p.Deleted != nil || p.Archived != nil {
			return fmt.Errorf("project %s is archived or deleted already: %w", name, ErrState)
		}
		p.Archived = &Mark{At: s.opt.Now().UTC(), By: by, Reason: reason}
		return nil
	})
}

// UnarchiveProject makes an archived project writable again.
func (s *Store) UnarchiveProject(ctx context.Context, name, by string) (*Project, error) {
	return s.markProject(ctx, name, by, "project.unarchive", "", func(p *Project) error {
		if p.Archived == nil || p.Deleted != nil {
			return fmt.Errorf("project %s is not archived: %w", name, ErrState)
		}
		p.Archived = nil
		return nil
	})
}

func (s *Store) markProject(ctx context.Context, name, by, action, detail string, change func(*Project) error) (*Project, error) {
	var p Project
	err := s.db.Update(func(tx *bolt.Tx) error {
		if err := getJSON(tx.Bucket(bucketProjects), []byte(name), &p, "project "+name); err != nil {
			return err
		}
		if err := change(&p); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketProjects), []byte(name), &p); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: action, Project: name, Target: name, Detail: detail}))
	})
	if err != nil {
		return nil, err
	}
	return &p, nil
}

// DeleteProject deletes a project and every dataset in it, as
// DeleteDataset by an admin does, in one transaction. The project's
// record (and sealed key) stays as a tombstone.
func (s *Store) DeleteProject(ctx context.Context, name, reason, by string) ([]Deletion, error) {
	reason, err := checkReason("delete", reason, true)
	if err != nil {
		return nil, err
	}
	out := []Deletion{}
	err = s.db.Update(func(tx *bolt.Tx) error {
		var p Project
		if err := getJSON(tx.Bucket(bucketProjects), []byte(name), &p, "project "+name); err != nil {
			return err
		}
		if p.Deleted != nil {
			return fmt.Errorf("project %s was deleted already: %w", name, ErrState)
		}
		ds, err := scanJSON[Dataset](tx.Bucket(bucketDatasets), []byte(name+"/"))
		if err != nil {
			return err
		}
		for _, d := range ds {
			if d.Deleted != nil {
				continue
			}
			del, err := s.deleteDataset(ctx, tx, d.Ref().String(), "project deleted: "+reason, by, true)
			if err != nil {
				return err
			}
			out = append(out, *del)
		}
		p.Deleted = &Mark{At: s.opt.Now().UTC(), By: by, Reason: reason}
		if err := putJSON(tx.Bucket(bucketProjects), []byte(name), &p); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: s.opt.Now(), By: by, Action: "project.delete", Project: name, Target: name,
			Detail: fmt.Sprintf("%s; %d datasets deleted", reason, len(out))}))
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// deletedDatasets returns the refs of the deleted datasets, in tx.
func deletedDatasets(tx *bolt.Tx) (map[DatasetRef]bool, error) {
	ds, err := scanJSON[Dataset](tx.Bucket(bucketDatasets), nil)
	if err != nil {
		return nil, err
	}
	out := map[DatasetRef]bool{}
	for _, d := range ds {
		if d.Deleted != nil {
			out[d.Ref()] = true
		}
	}
	return out, nil
}
