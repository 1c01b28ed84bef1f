package server

import (
	"bytes"
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
)

const attrProfile = `fields:
  site: {value: north}
  case_id: case
  event_type: type
  occurred_at: at
attributes:
  age: {column: AGE, role: quasi, type: age}
  zip: {column: ZIP, role: quasi, type: code, keep: 3}
  diagnosis: {column: DX, role: sensitive, type: code}
drop: [NOTES]
`

func TestDisclosureAPI(t *testing.T) {
	e := newEnv(t)
	e.createProject("p")
	e.createDataset("p", "d", attrProfile)
	ds := "/api/v1/projects/p/datasets/d"
	curator, member := e.curator("p"), e.member("p")
	putPolicy := func(tok, body string) response {
		return e.do(http.MethodPut, "/api/v1/projects/p/disclosure", tok, strings.NewReader(body), map[string]string{"Content-Type": "application/json"})
	}
	var pol catalog.DisclosurePolicy
	e.decode(e.get("/api/v1/projects/p/disclosure", member), &pol)
	if pol != catalog.DefaultDisclosurePolicy {
		t.Errorf("policy %+v, want the default", pol)
	}
	e.mustStatus(putPolicy(member, `{"k": 3, "max_risk": 0.34}`), http.StatusForbidden, "member sets the policy")
	if r := putPolicy(curator, `{"k": 1, "max_risk": 0.5}`); r.Status != http.StatusBadRequest || !strings.Contains(e.apiErr(r).Error.Message, "k 1") {
		t.Errorf("k 1: %d %s", r.Status, r.Body)
	}
	e.mustStatus(putPolicy(curator, `{"k": 3, "max_risk": 0.34}`), http.StatusOK, "set the policy")

	// Planted raw values: exact ages over 89, full postal codes, free text.
	var b bytes.Buffer
	b.WriteString("case,type,at,AGE,ZIP,DX,NOTES\n")
	for i := range 12 {
		age, zip := fmt.Sprint(30+i%3), "10115"
		if i == 11 {
			age, zip = "97.25", "99501-7788"
		}
		fmt.Fprintf(&b, "c%d,arrival,2026-03-02T%02d:00:00Z,%s,%s,D%d,\"PLANTED note on case %d\"\n", i, 8+i, age, zip, i%2, i)
	}
	r := e.upload("p", "d", e.partner("p/d"), "a.csv", b.Bytes())
	e.mustStatus(r, http.StatusCreated, "upload")
	var up struct{ Message string }
	e.decode(r, &up)
	if !strings.Contains(up.Message, "v1 is held as a draft: its disclosure risk (1.000) is above the project's threshold") {
		t.Errorf("upload message %q", up.Message)
	}
	var v catalog.Version
	e.decode(e.get(ds+"/versions/1", curator), &v)
	if v.State != catalog.StateDraft {
		t.Fatalf("a version with a unique case is %s, want draft", v.State)
	}
	var rep disclosure.Report
	e.decode(e.get(ds+"/versions/1/disclosure", curator), &rep)
	// Classes: (30-34, 101) of 11 cases, (90+, 995) of 1.
	if rep.Cases != 12 || rep.Classes != 2 || rep.Anonymity != 1 || rep.BelowK.Cases != 1 || !rep.AboveThreshold {
		t.Errorf("report %+v", rep)
	}
	// The curator sees the same figures on the version page before publishing.
	b2 := e.browser(t)
	b2.signIn(curator)
	pg := b2.page("/view/p/d/1", http.StatusOK)
	mustHave(t, "version page", pg, `id="disclosure-h"`, fmt.Sprintf(`data-k-anonymity="%d"`, rep.Anonymity),
		fmt.Sprintf("at most %.3f", rep.Risk.Max), fmt.Sprintf("the project asks for %d", rep.K), `id="disclosure-above"`, `<table id="diversity">`, "diagnosis")
	if r := e.postJSON(ds+"/versions/1/publish", curator, struct{}{}); r.Status != http.StatusConflict || e.apiErr(r).Error.Code != "disclosure_risk" {
		t.Errorf("publish above the threshold: %d %s", r.Status, r.Body)
	}
	e.mustStatus(e.postJSON(ds+"/versions/1/publish-override", member, map[string]string{"reason": "x"}), http.StatusForbidden, "member overrides")
	e.mustStatus(e.postJSON(ds+"/versions/1/publish-override", curator, map[string]string{"reason": ""}), http.StatusBadRequest, "override without reason")
	r = e.postJSON(ds+"/versions/1/publish-override", curator, map[string]string{"reason": "approved by the data access committee"})
	e.mustStatus(r, http.StatusOK, "override")
	e.decode(r, &v)
	if v.State != catalog.StatePublished || v.RiskOverride == nil || v.RiskOverride.Threshold != 0.34 {
		t.Errorf("after the override: %s %+v", v.State, v.RiskOverride)
	}
	e.mustStatus(e.get(ds+"/versions/1/disclosure", member), http.StatusOK, "member reads the report")

	// No planted value in any response or in the log.
	for _, body := range append(e.allBodies(), e.log.Bytes()) {
		for _, n := range []string{"97.25", "99501-7788", "PLANTED"} {
			if bytes.Contains(body, []byte(n)) {
				t.Errorf("%q in %s", n, clipBody(body))
			}
		}
	}
}
