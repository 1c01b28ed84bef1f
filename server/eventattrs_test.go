package server

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// Event attributes over HTTP: planted raw values (ages over 89, full
// postal codes, free text; 45 CFR 164.514(b)(2)(i)(B) and (C)) appear in
// no response and not in the log; the version names the columns with
// their roles and the CSV export carries them, generalized.
func TestEventAttributesOverHTTP(t *testing.T) {
	e := newEnv(t)
	e.createProject("p")
	e.createDataset("p", "d", "fields:\n  site: {value: harbour}\n  case_id: case\n  event_type: type\n  occurred_at: at\n"+
		"attributes:\n  step_age: {column: AGE, role: sensitive, type: age, level: event}\n  office: {column: ZIP, role: plain, type: code, keep: 3, level: event}\n"+
		"drop: [NOTES]\n")
	ds := "/api/v1/projects/p/datasets/d"
	curator := e.curator("p")
	var b bytes.Buffer
	b.WriteString("case,type,at,AGE,ZIP,NOTES\n")
	for i := range 6 {
		age, zip := fmt.Sprint(30+i), "10115"
		if i == 5 {
			age, zip = "97.25", "99501-7788"
		}
		fmt.Fprintf(&b, "c%d,arrival,2026-03-02T%02d:00:00Z,%s,%s,\"PLANTED note on case %d\"\n", i, 8+i, age, zip, i)
	}
	e.mustStatus(e.upload("p", "d", e.partner("p/d"), "a.csv", b.Bytes()), http.StatusCreated, "upload")
	var v catalog.Version
	e.decode(e.get(ds+"/versions/1", curator), &v)
	if len(v.Manifest.Files) != 1 || v.Manifest.Files[0].Attributes == nil {
		t.Fatalf("files %+v", v.Manifest.Files)
	}
	var roles []string
	for _, c := range v.Manifest.Files[0].Attributes.Columns() {
		roles = append(roles, c.Name+":"+string(c.Role))
	}
	if strings.Join(roles, ",") != "office:plain,step_age:sensitive" {
		t.Errorf("columns %v", roles)
	}
	r := e.get(ds+"/versions/1/export?format=csv", curator)
	e.mustStatus(r, http.StatusOK, "export")
	recs, err := csv.NewReader(bytes.NewReader(r.Body)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if h := recs[0]; len(h) < 2 || h[len(h)-2] != "office" || h[len(h)-1] != "step_age" {
		t.Fatalf("header %v", recs[0])
	}
	last := recs[len(recs)-1]
	// Safe Harbor: 97.25 is "90+", 99501-7788 keeps "995".
	if got := last[len(last)-2:]; got[0] != "995" || got[1] != "90+" {
		t.Errorf("the last event's attributes %v", got)
	}
	// The version page names them with their roles.
	br := e.browser(t)
	br.signIn(curator)
	pg := br.page("/view/p/d/1", http.StatusOK)
	mustHave(t, "version page", pg, `id="event-attributes"`, "<code>step_age</code> (age, sensitive: age in 5-year bands, 90 and over as one group (90&#43;))", "<code>office</code> (code, plain: first 3 characters kept)")
	for _, body := range append(e.allBodies(), e.log.Bytes()) {
		for _, n := range []string{"97.25", "99501", "PLANTED"} {
			if bytes.Contains(body, []byte(n)) {
				t.Errorf("%q in %s", n, clipBody(body))
			}
		}
	}
}
