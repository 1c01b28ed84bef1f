package catalog

import (
	"bytes"
	"context"
	"crypto/aes"
	"crypto/cipher"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// rekeyProfile maps raw identifiers that a leak scan can find by their
// prefix, and shifts times per subject.
const rekeyProfile = "fields:\n  site: {value: north}\n  case_id: case\n  subject_id: person\n  resource_id: desk\n  event_type: type\n  occurred_at: at\ntime_shift_days: 30\n"

// rekeyRows writes a CSV of the profile above; each row is case, subject,
// resource, type, minute offset from a base day.
func rekeyCSV(rows [][5]string) []byte {
	var b strings.Builder
	b.WriteString("case,person,desk,type,at\n")
	base := time.Date(2026, 4, 6, 8, 0, 0, 0, time.UTC)
	for _, r := range rows {
		var m int
		fmt.Sscan(r[4], &m)
		fmt.Fprintf(&b, "%s,%s,%s,%s,%s\n", r[0], r[1], r[2], r[3], base.Add(time.Duration(m)*time.Minute).Format(time.RFC3339))
	}
	return []byte(b.String())
}

// unsealForTest opens a sealed project key as anonymize documents it
// (AES-256-GCM under HMAC-SHA256(master, "flowcat/v1/seal project key"),
// additional data: label, big-endian length and name of the project, key
// id), independently of the package, so a leak scan can look for the key
// bytes themselves.
func unsealForTest(t *testing.T, master anonymize.MasterKey, project string, sk anonymize.SealedKey) []byte {
	t.Helper()
	h := hmac.New(sha256.New, master[:])
	h.Write([]byte("flowcat/v1/seal project key"))
	block, err := aes.NewCipher(h.Sum(nil))
	if err != nil {
		t.Fatal(err)
	}
	g, _ := cipher.NewGCM(block)
	ad := []byte("flowcat/v1/project key\x00")
	ad = binary.BigEndian.AppendUint32(ad, uint32(len(project)))
	ad = append(append(ad, project...), sk.ID...)
	key, err := g.Open(nil, sk.Nonce, sk.Ciphertext, ad)
	if err != nil {
		t.Fatalf("unseal %s: %v", sk.ID, err)
	}
	return key
}

// TestRotateProjectKey makes versions before and after a rotation of the
// project's pseudonym key and checks: pseudonyms differ across
// generations and agree within one; the first version after the rotation
// re-keys every held file and names the new key; a case spanning an upload
// before and after is one case; events re-sent after the rotation are
// recognised as held; time shifts stay; the linkability spans; the audit
// entry; and that neither raw identifiers nor key bytes reach disk or logs.
func TestRotateProjectKey(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(rekeyProfile) })
	first := [][5]string{
		{"CASE-RAW-0001", "SUBJ-RAW-01", "DESK-RAW-1", "arrival", "0"},
		{"CASE-RAW-0001", "SUBJ-RAW-01", "DESK-RAW-1", "start", "10"},
		{"CASE-RAW-0002", "SUBJ-RAW-02", "DESK-RAW-2", "arrival", "5"},
		{"CASE-RAW-0002", "SUBJ-RAW-02", "DESK-RAW-2", "start", "7"},
		{"CASE-RAW-0002", "SUBJ-RAW-02", "DESK-RAW-2", "complete", "30"},
		{"CASE-RAW-0002", "SUBJ-RAW-02", "DESK-RAW-2", "departure", "31"},
	}
	v1 := e.ingest(t, "p", "d", rekeyCSV(first), "first.csv").Version
	p0, _ := e.s.Project(ctx, "p")
	pz1, err := anonymize.OpenProjectKey(e.master, "p", p0.Key)
	if err != nil {
		t.Fatal(err)
	}
	if v1.Manifest.KeyID != p0.Key.ID {
		t.Fatalf("version 1 names key %s, the project's is %s", v1.Manifest.KeyID, p0.Key.ID)
	}
	evs1 := readEvents(t, e.blobBytes(t, v1.Manifest.Files[0].SHA256))
	for _, ev := range evs1 {
		if ev.CaseID != pz1.Pseudonym(schema.FieldCaseID, "CASE-RAW-0001") && ev.CaseID != pz1.Pseudonym(schema.FieldCaseID, "CASE-RAW-0002") {
			t.Fatalf("version 1 case id %q is not generation 1's", ev.CaseID)
		}
	}

	rot, err := e.s.RotateProjectKey(ctx, "p", "admin")
	if err != nil {
		t.Fatal(err)
	}
	p1, _ := e.s.Project(ctx, "p")
	if rot.OldKeyID != p0.Key.ID || rot.NewKeyID != p1.Key.ID || rot.Generation != 2 || len(p1.PriorKeys) != 1 || p1.PriorKeys[0].ID != p0.Key.ID {
		t.Fatalf("rotation %+v, project keys %s after %v", rot, p1.Key.ID, p1.PriorKeys)
	}
	pz2, err := anonymize.OpenKeyChain(e.master, "p", p1.KeyChain())
	if err != nil {
		t.Fatal(err)
	}

	// After the rotation: case 1 ends, case 3 comes, and every event of
	// the first upload is sent again in other bytes (other order).
	second := [][5]string{
		{"CASE-RAW-0001", "SUBJ-RAW-01", "DESK-RAW-1", "complete", "40"},
		{"CASE-RAW-0001", "SUBJ-RAW-01", "DESK-RAW-1", "departure", "41"},
		{"CASE-RAW-0003", "SUBJ-RAW-01", "DESK-RAW-2", "arrival", "50"},
	}
	resent := append(slices.Clone(second), first...)
	slices.Reverse(resent)
	res := e.ingest(t, "p", "d", rekeyCSV(resent), "second.csv")
	v2 := res.Version
	if res.Upload.Status != UploadAccepted || v2.Number != 2 {
		t.Fatalf("upload after rotation: %s, version %d", res.Upload.Status, v2.Number)
	}
	if ev := res.Upload.Events; ev == nil || ev.Held != int64(len(first)) || ev.New != int64(len(second)) {
		t.Fatalf("events %+v: want %d held, %d new", res.Upload.Events, len(first), len(second))
	}
	if v2.Manifest.Rows != int64(len(first)+len(second)) {
		t.Fatalf("version 2 holds %d rows, want %d (no duplicates)", v2.Manifest.Rows, len(first)+len(second))
	}
	if v2.Manifest.KeyID != rot.NewKeyID {
		t.Fatalf("version 2 names key %s, want %s", v2.Manifest.KeyID, rot.NewKeyID)
	}
	// Every file of version 2 is of generation 2: none of version 1's.
	gen1 := map[string]bool{}
	gen2 := map[string]bool{}
	for _, r := range append(slices.Clone(first), second...) {
		gen1[pz1.Pseudonym(schema.FieldCaseID, r[0])] = true
		gen1[pz1.Pseudonym(schema.FieldSubjectID, r[1])] = true
		gen1[pz1.Pseudonym(schema.FieldResourceID, r[2])] = true
		gen2[pz2.Pseudonym(schema.FieldCaseID, r[0])] = true
		gen2[pz2.Pseudonym(schema.FieldSubjectID, r[1])] = true
		gen2[pz2.Pseudonym(schema.FieldResourceID, r[2])] = true
	}
	var evs2 []schema.Event
	for _, f := range v2.Manifest.Files {
		if f.SHA256 == v1.Manifest.Files[0].SHA256 {
			t.Fatal("version 2 still holds version 1's file")
		}
		evs2 = append(evs2, readEvents(t, e.blobBytes(t, f.SHA256))...)
	}
	for _, ev := range evs2 {
		for _, id := range []string{ev.CaseID, ev.SubjectID, ev.ResourceID} {
			if gen1[id] || !gen2[id] {
				t.Fatalf("version 2 holds %q, not a generation-2 pseudonym", id)
			}
		}
	}
	// Within a generation pseudonyms agree, across generations they differ.
	c1 := pz2.Pseudonym(schema.FieldCaseID, "CASE-RAW-0001")
	if c1 == pz1.Pseudonym(schema.FieldCaseID, "CASE-RAW-0001") {
		t.Fatal("the generations share a pseudonym")
	}
	// Times did not move: version 1's events are in version 2 at the same
	// instants (the per-subject shift stays on generation 1).
	times := func(evs []schema.Event, caseID string) []time.Time {
		var out []time.Time
		for _, ev := range evs {
			if ev.CaseID == caseID {
				out = append(out, ev.OccurredAt)
			}
		}
		slices.SortFunc(out, time.Time.Compare)
		return out
	}
	t1 := times(evs1, pz1.Pseudonym(schema.FieldCaseID, "CASE-RAW-0002"))
	t2 := times(evs2, pz2.Pseudonym(schema.FieldCaseID, "CASE-RAW-0002"))
	if !slices.Equal(t1, t2) || len(t1) != 4 {
		t.Fatalf("case 2's times: %v before, %v after the rotation", t1, t2)
	}
	// The case spanning both uploads is one case of version 2.
	ct, err := e.s.blobs.Open(ctx, v2.Manifest.CaseTable.SHA256)
	if err != nil {
		t.Fatal(err)
	}
	var rows []cases.Row
	err = ReadCaseTable(ct, ct.Size(), func(r *cases.Row) error {
		c := *r
		c.CaseID = strings.Clone(c.CaseID)
		rows = append(rows, c)
		return nil
	})
	ct.Close()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 {
		t.Fatalf("version 2's case table has %d cases, want 3", len(rows))
	}
	for _, r := range rows {
		if r.CaseID == c1 && r.Events != 4 {
			t.Fatalf("case 1 has %d events in version 2, want 4 (both uploads)", r.Events)
		}
	}

	// Sent a third time after the rotation: all held, no new version.
	again := e.ingest(t, "p", "d", rekeyCSV(append(slices.Clone(first), second...)), "third.csv")
	if again.Upload.Status != UploadDuplicate || again.Version.Number != 2 || again.Upload.Events.Held != int64(len(first)+len(second)) {
		t.Fatalf("re-sent after rotation: %s, version %d, events %+v", again.Upload.Status, again.Version.Number, again.Upload.Events)
	}
	// A later upload under the same generation builds on version 2 as is.
	v3 := e.ingest(t, "p", "d", rekeyCSV([][5]string{{"CASE-RAW-0003", "SUBJ-RAW-01", "DESK-RAW-2", "departure", "60"}}), "fourth.csv").Version
	if !slices.ContainsFunc(v3.Manifest.Files, func(f FileEntry) bool { return f.SHA256 == v2.Manifest.Files[0].SHA256 }) {
		t.Fatal("version 3 re-keyed files of its own generation")
	}

	spans, err := e.s.KeySpans(ctx, "p", "d")
	if err != nil {
		t.Fatal(err)
	}
	want := []KeySpan{{KeyID: rot.OldKeyID, Generation: 1, Versions: []int{1}}, {KeyID: rot.NewKeyID, Generation: 2, Versions: []int{2, 3}}}
	if fmt.Sprint(spans) != fmt.Sprint(want) {
		t.Fatalf("key spans %+v, want %+v", spans, want)
	}

	au, _, err := e.s.AuditPage(ctx, AuditFilter{Action: "key.project_rotate"})
	if err != nil || len(au) != 1 {
		t.Fatalf("audit: %v, %+v", err, au)
	}
	if a := au[0]; a.By != "admin" || a.Project != "p" || !strings.Contains(a.Detail, rot.OldKeyID) || !strings.Contains(a.Detail, rot.NewKeyID) || a.Outcome != OutcomeOK {
		t.Fatalf("audit entry %+v", a)
	}

	// Leak scan: no raw identifier anywhere under the data directory or in
	// the logs; the project keys and the master key appear nowhere, in
	// bytes or hex (the sealed keys live only in the catalog's bbolt file,
	// encrypted).
	needles := []string{"CASE-RAW", "SUBJ-RAW", "DESK-RAW", e.master.Hex(), string(e.master[:])}
	for _, sk := range p1.KeyChain() {
		k := unsealForTest(t, e.master, "p", sk)
		needles = append(needles, string(k), hex.EncodeToString(k))
	}
	if hits := grepDir(t, e.dir, needles); len(hits) > 0 {
		t.Fatalf("leaked: %v", hits)
	}
	mustContainNone(t, "logs", e.logs.String(), needles)
	e.assertTempEmpty(t)

	// The master key rotation re-seals both generations: uploads go on.
	newM, _ := anonymize.GenerateMasterKey()
	if _, err := e.s.RotateMasterKey(ctx, newM, "operator"); err != nil {
		t.Fatal(err)
	}
	e.master = newM
	e.open(t, nil)
	more := e.ingest(t, "p", "d", rekeyCSV(append(slices.Clone(first), second...)), "fifth.csv")
	if more.Upload.Status != UploadDuplicate {
		t.Fatalf("after the master key rotation the held events were not recognised: %s %+v", more.Upload.Status, more.Upload.Events)
	}
}

// TestRotateProjectKeyRefusals: an unknown project has no key to rotate; an upload read under the old generation fails whole.
func TestRotateProjectKeyRefusals(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	if _, err := e.s.RotateProjectKey(ctx, "nope", "admin"); err == nil || !strings.Contains(err.Error(), "not found") {
		t.Fatalf("unknown project: %v", err)
	}
	e.dataset(t, "p", "d", nil)
	// A rotation between the read of an upload and its commit.
	ds, _ := e.s.Dataset(ctx, "p", "d")
	proj, _ := e.s.Project(ctx, "p")
	pz, _ := anonymize.OpenKeyChain(e.master, "p", proj.KeyChain())
	if _, err := e.s.RotateProjectKey(ctx, "p", "admin"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.carryLatest(ctx, ds, pz, ModeAppend, quality.Options{UploadedAt: testNow}); err == nil || !strings.Contains(err.Error(), ErrKeyRotated.Error()) {
		t.Fatalf("an upload read under the replaced key: %v", err)
	}
}

// TestRotateProjectKeyAttributes: the case attributes of a version made
// before a rotation are carried with their cases: after it, the version
// made by an upload of other cases holds every case's attributes under
// the new generation's case ids, and the same values as before.
func TestRotateProjectKeyAttributes(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(attrProfile) })
	v1 := e.ingest(t, "p", "d", attrCSV(attrCases[:4], 2, ""), "a.csv").Version
	before := e.attributeRows(t, v1)
	if _, err := e.s.RotateProjectKey(ctx, "p", "admin"); err != nil {
		t.Fatal(err)
	}
	v2 := e.ingest(t, "p", "d", attrCSV(attrCases[4:6], 3, ""), "b.csv").Version
	after := e.attributeRows(t, v2)
	p, _ := e.s.Project(ctx, "p")
	pz1, _ := anonymize.OpenProjectKey(e.master, "p", p.PriorKeys[0])
	pz2, _ := anonymize.OpenKeyChain(e.master, "p", p.KeyChain())
	if len(after) != 6 {
		t.Fatalf("version 2 has attributes of %d cases, want 6", len(after))
	}
	for _, c := range attrCases[:4] {
		old, cur := pz1.Pseudonym(schema.FieldCaseID, c[0]), pz2.Pseudonym(schema.FieldCaseID, c[0])
		if _, ok := after[old]; ok {
			t.Errorf("case %s kept its generation-1 id in version 2", c[0])
		}
		if fmt.Sprint(after[cur]) != fmt.Sprint(before[old]) {
			t.Errorf("case %s: attributes %v after the rotation, %v before", c[0], after[cur], before[old])
		}
	}
}

// TestRotateProjectKeyReplaceWindow: a replace-window upload after a
// rotation cuts the carried files; the version holds generation-2
// pseudonyms only, the kept events and the replacement, and a merged
// quality report.
func TestRotateProjectKeyReplaceWindow(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(strings.TrimSuffix(rekeyProfile, "time_shift_days: 30\n")) })
	// Two days of events; the first day is replaced after the rotation.
	rows := [][5]string{
		{"CASE-RAW-0001", "SUBJ-RAW-01", "DESK-RAW-1", "arrival", "0"},
		{"CASE-RAW-0001", "SUBJ-RAW-01", "DESK-RAW-1", "departure", "20"},
		{"CASE-RAW-0002", "SUBJ-RAW-02", "DESK-RAW-2", "arrival", "2880"},
		{"CASE-RAW-0002", "SUBJ-RAW-02", "DESK-RAW-2", "departure", "2900"},
	}
	e.ingest(t, "p", "d", rekeyCSV(rows), "a.csv")
	if _, err := e.s.RotateProjectKey(ctx, "p", "admin"); err != nil {
		t.Fatal(err)
	}
	p, _ := e.s.Project(ctx, "p")
	pz2, _ := anonymize.OpenKeyChain(e.master, "p", p.KeyChain())
	base := time.Date(2026, 4, 6, 8, 0, 0, 0, time.UTC)
	from, to := base.Add(-time.Hour), base.Add(24*time.Hour)
	repl := [][5]string{{"CASE-RAW-0009", "SUBJ-RAW-09", "DESK-RAW-1", "arrival", "5"}}
	res, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(rekeyCSV(repl)), IngestOptions{Filename: "r.csv", By: "curator", Mode: ModeReplaceWindow, From: from, To: to, Sites: []string{"north"}})
	if err != nil {
		t.Fatal(err)
	}
	v := res.Version
	if v.Manifest.KeyID != p.Key.ID {
		t.Fatalf("version %d names key %s, want %s", v.Number, v.Manifest.KeyID, p.Key.ID)
	}
	cases := map[string]int{}
	for _, f := range v.Manifest.Files {
		for _, ev := range readEvents(t, e.blobBytes(t, f.SHA256)) {
			cases[ev.CaseID]++
		}
	}
	want := map[string]int{pz2.Pseudonym(schema.FieldCaseID, "CASE-RAW-0002"): 2, pz2.Pseudonym(schema.FieldCaseID, "CASE-RAW-0009"): 1}
	if fmt.Sprint(cases) != fmt.Sprint(want) {
		t.Fatalf("version %d holds cases %v, want %v (case 1 replaced, all of generation 2)", v.Number, cases, want)
	}
	if rep := e.report(t, v); rep == nil || rep.Rows.Total == 0 {
		t.Fatalf("version %d has no merged report", v.Number)
	}
}
