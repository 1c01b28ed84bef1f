package catalog

import (
	"bytes"
	"context"
	"errors"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
)

// A partner's export whose columns changed names between two years: the
// second profile maps the new names.
const (
	oldExport = "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\nnorth,c1,departure,2024-01-01T09:00:00Z\n"
	newExport = "Site,Ticket,Kind,When\nnorth,c2,arrival,2025-01-01T08:00:00Z\nnorth,c2,departure,2025-01-01T09:00:00Z\n"
	newMap    = "fields:\n  site: \"Site\"\n  case_id: \"Ticket\"\n  event_type: \"Kind\"\n  occurred_at: \"When\"\n"
)

// TestProfileRevisions checks that a profile change makes a new revision
// for later uploads, and that the versions before and after it read back
// with the revision each was read with (manifest, VersionProfile,
// DatasetAsRead), the earlier one unchanged.
func TestProfileRevisions(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	d := e.dataset(t, "p", "visits", nil)
	if d.ProfileRevision != 1 {
		t.Fatalf("new dataset at profile revision %d, want 1", d.ProfileRevision)
	}
	v1 := e.ingest(t, "p", "visits", []byte(oldExport), "2024.csv").Version
	// Before the change the new export does not map.
	if _, err := e.s.Ingest(ctx, "p", "visits", strings.NewReader(newExport), IngestOptions{By: "x"}); err == nil {
		t.Fatal("an export with other column names was accepted under the old profile")
	}
	prof := newMap
	nd, err := e.s.EditDataset(ctx, "p", "visits", DatasetEdit{Profile: &prof}, "curator")
	if err != nil {
		t.Fatal(err)
	}
	if nd.ProfileRevision != 2 || nd.ProfileHash == d.ProfileHash {
		t.Fatalf("after the change: revision %d hash %s (was %s)", nd.ProfileRevision, nd.ProfileHash, d.ProfileHash)
	}
	// The same profile again changes nothing.
	if again, err := e.s.EditDataset(ctx, "p", "visits", DatasetEdit{Profile: &prof}, "curator"); err != nil || again.ProfileRevision != 2 {
		t.Fatalf("same profile again: revision %d, %v", again.ProfileRevision, err)
	}
	v2 := e.ingest(t, "p", "visits", []byte(newExport), "2025.csv").Version

	for _, tc := range []struct {
		n       int
		rev     int
		hash    string
		profile string
	}{{v1.Number, 1, d.ProfileHash, ""}, {v2.Number, 2, nd.ProfileHash, newMap}} {
		v, err := e.s.Version(ctx, "p", "visits", tc.n)
		if err != nil {
			t.Fatal(err)
		}
		if v.Manifest.ProfileRevision != tc.rev || v.Manifest.ProfileHash != tc.hash {
			t.Errorf("version %d: manifest revision %d hash %s, want %d %s", tc.n, v.Manifest.ProfileRevision, v.Manifest.ProfileHash, tc.rev, tc.hash)
		}
		b, err := e.s.ManifestBytes(ctx, v)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Contains(b, []byte(`"profile_revision":`+string(rune('0'+tc.rev)))) {
			t.Errorf("version %d: stored manifest %s lacks its profile revision", tc.n, b)
		}
		pr, err := e.s.VersionProfile(ctx, v)
		if err != nil || pr.Revision != tc.rev || pr.Profile != tc.profile || pr.ProfileHash != tc.hash {
			t.Errorf("version %d: profile %+v, %v", tc.n, pr, err)
		}
		ad, err := e.s.DatasetAsRead(ctx, v)
		if err != nil || ad.Revision() != tc.rev || ad.Profile != tc.profile {
			t.Errorf("version %d: dataset as read %+v, %v", tc.n, ad, err)
		}
	}
	revs, err := e.s.ProfileRevisions(ctx, "p", "visits")
	if err != nil || len(revs) != 2 || revs[0].Revision != 1 || revs[1].Revision != 2 || revs[1].Profile != newMap {
		t.Fatalf("revisions %+v, %v", revs, err)
	}
}

// TestDatasetEdits checks title, threshold and window edits, their
// refusals by name, and the audit entry naming the fields changed.
func TestDatasetEdits(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "p", "d", nil)
	title, share := "Clinic visits", 0.2
	from, to := time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	d, err := e.s.EditDataset(ctx, "p", "d", DatasetEdit{Title: &title, RejectAbove: &share, WindowFrom: &from, WindowTo: &to}, "cur")
	if err != nil {
		t.Fatal(err)
	}
	if d.Title != title || d.RejectAbove != share || !d.WindowFrom.Equal(from) || !d.WindowTo.Equal(to) || d.ProfileRevision != 1 {
		t.Fatalf("edited %+v", d)
	}
	bad, tooMuch := to, 1.5
	for name, ed := range map[string]DatasetEdit{
		"reject-above": {RejectAbove: &tooMuch},
		"window":       {WindowFrom: &bad},
		"profile":      {Profile: ptr("fields: [")},
		"zone":         {Timezone: ptr("Mars/Olympus")},
	} {
		if _, err := e.s.EditDataset(ctx, "p", "d", ed, "cur"); !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), strings.Split(name, "-")[0]) && name != "profile" && name != "zone" {
			t.Errorf("edit %s: %v, want ErrInvalid naming it", name, err)
		}
	}
	if got, _ := e.s.Dataset(ctx, "p", "d"); got.RejectAbove != share {
		t.Errorf("a refused edit changed the dataset: %+v", got)
	}
	au, _, _ := e.s.AuditPage(ctx, AuditFilter{Action: "dataset.edit"})
	if len(au) != 1 || au[0].Project != "p" || au[0].Dataset != "d" || !strings.Contains(au[0].Detail, "reject_above 0.05 -> 0.2") {
		t.Fatalf("edit audit %+v", au)
	}
}

func ptr[T any](v T) *T { return &v }

// TestArchiveAndDelete checks that an archived dataset takes no upload or
// edit, keeps every version readable, and comes back when unarchived;
// that a dataset with a published version is deleted by an admin only;
// that deletion retracts the versions with the reason, hides the dataset,
// keeps its name, and lets the collector remove the files no live
// version needs while keeping the ones another dataset shares.
func TestArchiveAndDelete(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.Now = time.Now })
	ctx := context.Background()
	e.dataset(t, "p", "a", nil)
	e.dataset(t, "p", "b", nil)
	shared := []byte(oldExport)
	e.ingest(t, "p", "a", shared, "x.csv")
	e.ingest(t, "p", "b", shared, "x.csv") // same file: same blob, shared
	only := e.ingest(t, "p", "a", []byte("site,case_id,event_type,occurred_at\nsouth,c9,arrival,2024-02-01T08:00:00Z\n"), "y.csv").Version

	if _, err := e.s.ArchiveDataset(ctx, "p", "a", "study closed", "cur"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.Ingest(ctx, "p", "a", strings.NewReader(oldExport), IngestOptions{By: "x"}); !errors.Is(err, ErrState) || !strings.Contains(err.Error(), "archived") {
		t.Fatalf("upload to an archived dataset: %v", err)
	}
	if _, err := e.s.EditDataset(ctx, "p", "a", DatasetEdit{Title: ptr("t")}, "cur"); !errors.Is(err, ErrState) {
		t.Fatalf("edit of an archived dataset: %v", err)
	}
	if v, err := e.s.Version(ctx, "p", "a", only.Number); err != nil || v.State != StatePublished {
		t.Fatalf("a version of an archived dataset: %+v, %v", v, err)
	}
	if _, err := e.s.UnarchiveDataset(ctx, "p", "a", "cur"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.ArchiveDataset(ctx, "p", "a", "", "cur"); err != nil {
		t.Fatal(err)
	}

	if _, err := e.s.DeleteDataset(ctx, "p", "a", "", "cur", true); !errors.Is(err, ErrInvalid) {
		t.Fatalf("delete without a reason: %v", err)
	}
	if _, err := e.s.DeleteDataset(ctx, "p", "a", "consent withdrawn", "cur", false); !errors.Is(err, ErrState) || !strings.Contains(err.Error(), "admin") {
		t.Fatalf("curator deletes a dataset with published versions: %v", err)
	}
	del, err := e.s.DeleteDataset(ctx, "p", "a", "consent withdrawn", "admin", true)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(del.Retracted, []int{1, 2}) || !slices.Equal(del.Published, []int{1, 2}) {
		t.Fatalf("deletion %+v", del)
	}
	v, err := e.s.Version(ctx, "p", "a", 2)
	if err != nil || v.State != StateRetracted || !strings.Contains(v.RetractReason, "consent withdrawn") {
		t.Fatalf("version of a deleted dataset: %+v, %v", v, err)
	}
	ds, _ := e.s.Datasets(ctx, "p")
	if len(ds) != 1 || ds[0].Name != "b" {
		t.Fatalf("datasets after delete: %+v", ds)
	}
	if _, err := e.s.CreateDataset(ctx, DatasetSpec{Project: "p", Name: "a"}, "cur"); !errors.Is(err, ErrExists) {
		t.Fatalf("reusing a deleted dataset's name: %v", err)
	}

	res, err := e.s.CollectGarbage(ctx, GCOptions{Grace: -1}, "admin")
	if err != nil {
		t.Fatal(err)
	}
	gone := map[string]bool{}
	for _, id := range res.Deleted {
		gone[id.String()] = true
	}
	for _, f := range v.Manifest.Files {
		if f.Upload == only.Manifest.Lineage.Upload && !gone[f.SHA256.String()] {
			t.Errorf("file %s only the deleted dataset listed was kept", f.SHA256)
		}
	}
	bv, _ := e.s.Version(ctx, "p", "b", 1)
	for _, b := range bv.Manifest.Blobs() {
		if gone[b.SHA256.String()] {
			t.Errorf("file %s of a live dataset was collected", b.SHA256)
		}
		r, err := e.s.Blobs().Open(ctx, b.SHA256)
		if err != nil {
			t.Fatalf("live dataset's file %s: %v", b.SHA256, err)
		}
		r.Close()
	}
	if len(res.Deleted) == 0 {
		t.Fatal("the collector removed nothing of the deleted dataset")
	}

	// Project archive and delete.
	if _, err := e.s.ArchiveProject(ctx, "p", "", "admin"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.Ingest(ctx, "p", "b", strings.NewReader(oldExport), IngestOptions{By: "x"}); !errors.Is(err, ErrState) || !strings.Contains(err.Error(), "project p is archived") {
		t.Fatalf("upload into an archived project: %v", err)
	}
	dels, err := e.s.DeleteProject(ctx, "p", "ended", "admin")
	if err != nil || len(dels) != 1 || dels[0].Dataset.Name != "b" {
		t.Fatalf("delete project: %+v, %v", dels, err)
	}
	if ps, _ := e.s.Projects(ctx); len(ps) != 0 {
		t.Fatalf("projects after delete: %+v", ps)
	}
	acts := map[string]bool{}
	all, _ := e.s.Audit(ctx)
	for _, a := range all {
		acts[a.Action] = true
	}
	for _, want := range []string{"dataset.archive", "dataset.unarchive", "dataset.delete", "project.archive", "project.delete"} {
		if !acts[want] {
			t.Errorf("no %s entry in the audit trail", want)
		}
	}
}

// TestRotateMasterKey checks that rotating the master key re-seals every
// project key with the same id, so that an upload after it gives the same
// pseudonyms as one before (the held events are recognised as held); that
// the catalog then opens under the new key only; and that no data file
// changed.
func TestRotateMasterKey(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "p", "d", nil)
	v1 := e.ingest(t, "p", "d", []byte(oldExport), "a.csv").Version
	before := e.blobIDs(t)
	p0, _ := e.s.Project(ctx, "p")
	newM, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	if n, err := e.s.RotateMasterKey(ctx, newM, "operator"); err != nil || n != 1 {
		t.Fatalf("rotate: %d, %v", n, err)
	}
	p1, _ := e.s.Project(ctx, "p")
	if p1.Key.ID != p0.Key.ID || bytes.Equal(p1.Key.Ciphertext, p0.Key.Ciphertext) {
		t.Fatalf("project key after rotation %+v, before %+v", p1.Key, p0.Key)
	}
	// The same events again, plus one: the held ones are recognised, so the
	// pseudonyms did not change.
	more := oldExport + "north,c3,arrival,2024-01-02T08:00:00Z\n"
	res := e.ingest(t, "p", "d", []byte(more), "b.csv")
	if res.Upload.Events == nil || res.Upload.Events.Held != 2 || res.Upload.Events.New != 1 {
		t.Fatalf("after rotation the upload's events %+v: want 2 held, 1 new", res.Upload.Events)
	}
	if !containsAll(e.blobIDs(t), before) {
		t.Fatal("rotation changed a data file")
	}
	old := e.master
	e.master = newM
	e.open(t, nil)
	if v, err := e.s.Version(ctx, "p", "d", v1.Number); err != nil || v.SnapshotID != v1.SnapshotID {
		t.Fatalf("version 1 after reopening under the new key: %v", err)
	}
	e.s.Close()
	e.s = nil
	if _, err := Open(e.dbPath, e.blobs, e.options(func(o *Options) { o.Master = old })); !errors.Is(err, anonymize.ErrKeyMismatch) {
		t.Fatalf("opening under the old master key: %v", err)
	}
	e.open(t, nil)
	au, _, _ := e.s.AuditPage(ctx, AuditFilter{Action: "key.master_rotate"})
	if len(au) != 1 || !strings.Contains(au[0].Detail, "1 project keys") {
		t.Fatalf("audit %+v", au)
	}
}

func containsAll[T comparable](have, want []T) bool {
	for _, w := range want {
		if !slices.Contains(have, w) {
			return false
		}
	}
	return true
}
