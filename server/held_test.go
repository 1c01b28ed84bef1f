package server

import (
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// heldCSV is n events of one site in the schema's own columns, with event
// ids; outcome overrides the outcome of the events at the given indexes.
func heldCSV(n int, outcome map[int]string) []byte {
	var b strings.Builder
	b.WriteString("site,case_id,event_type,occurred_at,outcome,event_id\n")
	for i := 0; i < n; i++ {
		o := "home"
		if v, ok := outcome[i]; ok {
			o = v
		}
		fmt.Fprintf(&b, "north,C-%d,%s,2026-03-02T%02d:%02d:00Z,%s,ev-%d\n", i/3, []string{"arrival", "start", "complete"}[i%3], i/60, i%60, o, i)
	}
	return []byte(b.String())
}

// The API says what an upload did, refuses a changed event under a stable
// event_id with its line and field, and a curator's policy change makes
// the same upload a correction.
func TestUploadHeldEventsAPI(t *testing.T) {
	e := newEnv(t)
	e.createProject("lab")
	profile := "fields:\n  site: site\n  case_id: case_id\n  event_type: event_type\n  occurred_at: occurred_at\n  outcome: outcome\n  event_id: {column: event_id, stable: true}\n"
	e.createDataset("lab", "flow", profile)
	partner := e.partner("lab/flow")

	r := e.upload("lab", "flow", partner, "day.csv", heldCSV(90, nil))
	e.mustStatus(r, http.StatusCreated, "first upload")
	var res api.UploadResult
	e.decode(r, &res)
	if res.Message != "v1: 90 new events, 0 already held, 0 changed" {
		t.Errorf("message %q", res.Message)
	}

	// The same day and ten more events.
	r = e.upload("lab", "flow", partner, "day2.csv", heldCSV(100, nil))
	e.mustStatus(r, http.StatusCreated, "overlapping upload")
	e.decode(r, &res)
	if res.Message != "v2: 10 new events, 90 already held, 0 changed" || res.Upload.Events.Held != 90 || res.Version.Manifest.Lineage.Events.New != 10 {
		t.Errorf("message %q, counts %+v", res.Message, res.Upload.Events)
	}

	// All held: a duplicate of v2.
	r = e.upload("lab", "flow", partner, "day3.csv", heldCSV(100, nil)[:len(heldCSV(60, nil))])
	e.mustStatus(r, http.StatusOK, "held-only upload")
	e.decode(r, &res)
	if res.Upload.Status != catalog.UploadDuplicate || !strings.HasPrefix(res.Message, "v2 already holds every event: 0 new events, 60 already held") {
		t.Errorf("held-only: %s %q", res.Upload.Status, res.Message)
	}

	// A changed outcome on line 42 (event 40): refused by default.
	changed := heldCSV(100, map[int]string{40: "admitted"})
	r = e.upload("lab", "flow", partner, "fix.csv", changed)
	e.mustStatus(r, http.StatusUnprocessableEntity, "changed event")
	ae := e.apiErr(r)
	if ae.Error.Rule != catalog.RuleChangedEvent || ae.Error.Line != 42 || ae.Error.Column != "outcome" || strings.Contains(ae.Error.Message, "admitted") {
		t.Errorf("refusal %+v", ae.Error)
	}

	// Only a curator sets the policy.
	r = e.postJSON("/api/v1/projects/lab/datasets/flow/changes", partner, map[string]string{"changes": "correct"})
	e.mustStatus(r, http.StatusForbidden, "partner sets the policy")
	r = e.postJSON("/api/v1/projects/lab/datasets/flow/changes", e.curator("lab"), map[string]string{"changes": "sometimes"})
	e.mustStatus(r, http.StatusBadRequest, "unknown policy")
	r = e.postJSON("/api/v1/projects/lab/datasets/flow/changes", e.curator("lab"), map[string]string{"changes": "correct"})
	e.mustStatus(r, http.StatusOK, "set the policy")
	if d := e.dataset("lab", "flow"); d.Changes != catalog.ChangesCorrect {
		t.Fatalf("policy %q", d.Changes)
	}
	r = e.upload("lab", "flow", partner, "fix.csv", changed)
	e.mustStatus(r, http.StatusCreated, "correction")
	e.decode(r, &res)
	if res.Message != "v3: 0 new events, 99 already held, 1 changed (1 old event replaced)" || res.Version.Manifest.Rows != 100 {
		t.Errorf("correction: %q, %d rows", res.Message, res.Version.Manifest.Rows)
	}
}

// An upload whose stable-id look-around narrowed under the catalog's bound
// says so in the API's message, in its counts and the version's lineage,
// and on the dataset's page.
func TestUploadChangeWindowNarrowed(t *testing.T) {
	e := newEnvStore(t, t.TempDir(), catalog.Options{ChangeWindowBytes: 2000})
	e.createProject("lab")
	profile := "fields:\n  site: site\n  case_id: case_id\n  event_type: event_type\n  occurred_at: occurred_at\n  outcome: outcome\n  event_id: {column: event_id, stable: true}\n"
	e.createDataset("lab", "flow", profile)
	partner := e.partner("lab/flow")
	e.mustStatus(e.upload("lab", "flow", partner, "day.csv", heldCSV(90, nil)), http.StatusCreated, "first upload")
	r := e.upload("lab", "flow", partner, "day2.csv", heldCSV(100, nil))
	e.mustStatus(r, http.StatusCreated, "the day again")
	var res api.UploadResult
	e.decode(r, &res)
	w := res.Upload.Events.ChangeWindow
	if w == nil || w.Bytes != 2000 || w.Seconds <= 0 || w.Seconds >= 86400 || res.Version.Manifest.Lineage.Events.ChangeWindow == nil ||
		res.Upload.Events.Held != 90 || res.Upload.Events.New != 10 {
		t.Fatalf("counts %+v, change window %+v", res.Upload.Events, w)
	}
	if want := "v2: 10 new events, 90 already held, 0 changed; changes looked for within "; !strings.HasPrefix(res.Message, want) || !strings.HasSuffix(res.Message, " either way from 2026-03-02T00:00:00Z (the events kept reached 2,000 bytes)") {
		t.Errorf("message %q, want it to begin %q and name the bound", res.Message, want)
	}
	b := e.browser(t)
	b.signIn(e.member("lab"))
	page := b.page("/view/lab/flow", http.StatusOK)
	mustHave(t, "dataset page", page, "10 new; changes looked for within", "either way from 2026-03-02 00:00 UTC (<code>change_window</code>)")
}
