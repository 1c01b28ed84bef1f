package server

import (
	"archive/tar"
	"bytes"
	"encoding/json"
	"io"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestDatasetMetadata: a curator sets a dataset's DataCite metadata; it is
// refused with the member named when bad, and carried into the citation
// (valid CFF 1.2.0) and the bundle (datacite.json, README.md).
func TestDatasetMetadata(t *testing.T) {
	e := newEnv(t)
	e.createProject("clinic")
	e.createDataset("clinic", "visits", "")
	r := e.upload("clinic", "visits", e.partner("clinic/visits"), "a.csv", []byte("site,case_id,event_type,occurred_at\nnorth,c1,arrival,2026-03-02T08:00:00Z\nnorth,c1,departure,2026-03-02T09:00:00Z\n"))
	e.mustStatus(r, http.StatusCreated, "upload")
	ds := "/api/v1/projects/clinic/datasets/visits"
	member, curator := e.member("clinic"), e.curator("clinic")

	var empty catalog.DatasetMetadata
	e.decode(e.get(ds+"/metadata", member), &empty)
	if len(empty.Creators) != 0 || empty.License != "" {
		t.Errorf("metadata before any: %+v", empty)
	}
	before := e.get(ds+"/versions/1/bundle", member).Header.Get("ETag")

	meta := map[string]any{
		"creators": []any{
			map[string]any{"given_name": "Ada", "family_name": "Quill", "affiliation": "Harbour Lab", "orcid": "https://orcid.org/0000-0002-1825-0097"},
			map[string]any{"name": "Harbour Lab"},
		},
		"publisher":   "Harbour Lab",
		"license":     "cc-by-4.0",
		"description": "Arrivals and departures of an invented walk-in clinic.",
		"keywords":    []string{"walk-in clinic", "queueing", "queueing"},
		"related_identifiers": []any{
			map[string]any{"identifier": "10.1234/protocol.5", "type": "DOI", "relation": "IsDocumentedBy"},
			map[string]any{"identifier": "https://example.org/study", "type": "URL", "relation": "IsSupplementTo"},
		},
	}
	if r := e.postJSON(ds+"/metadata", e.partner("clinic/visits"), meta); r.Status != http.StatusForbidden {
		t.Errorf("a partner set metadata: %d", r.Status)
	}
	r = e.postJSON(ds+"/metadata", curator, meta)
	e.mustStatus(r, http.StatusOK, "set metadata")
	var got catalog.DatasetMetadata
	e.decode(r, &got)
	if got.License != "CC-BY-4.0" || len(got.Keywords) != 2 || got.UpdatedBy != "curator-clinic" {
		t.Errorf("stored %+v: want the SPDX spelling CC-BY-4.0, keywords once each", got)
	}
	// Each setting is a change of the catalog, so an entry of the audit
	// trail: who, on which dataset, the members changed, none of their
	// values (a person's name among them).
	changeLicense := map[string]any{}
	for k, v := range meta {
		changeLicense[k] = v
	}
	changeLicense["license"] = "CC0-1.0"
	e.mustStatus(e.postJSON(ds+"/metadata", curator, changeLicense), http.StatusOK, "change the license")
	e.mustStatus(e.postJSON(ds+"/metadata", curator, changeLicense), http.StatusOK, "the same again")
	var page api.AuditPage
	e.decode(e.get("/api/v1/audit?limit=1000&action=dataset.metadata", curator), &page)
	var details []string
	for _, a := range page.Entries {
		if a.Dataset != "visits" || a.Target != "clinic/visits" || a.By != "curator-clinic" || a.Role != "curator" {
			t.Errorf("metadata entry %+v", a)
		}
		if strings.Contains(a.Detail, "Quill") || strings.Contains(a.Detail, "CC0") {
			t.Errorf("metadata entry holds a value: %q", a.Detail)
		}
		details = append(details, a.Detail)
	}
	want := []string{"set creators, publisher, license, description, keywords, related_identifiers", "set license", "no member changed"}
	if strings.Join(details, "|") != strings.Join(want, "|") {
		t.Errorf("metadata entries %q, want %q", details, want)
	}
	e.mustStatus(e.postJSON(ds+"/metadata", curator, meta), http.StatusOK, "the license back")

	for _, bad := range []struct {
		change func(map[string]any)
		want   string
	}{
		{func(m map[string]any) { m["license"] = "Free-For-All" }, "license"},
		{func(m map[string]any) {
			m["creators"] = []any{map[string]any{"given_name": "A", "family_name": "B", "orcid": "https://orcid.org/0000-0002-1825-0098"}}
		}, "orcid"},
		{func(m map[string]any) {
			m["related_identifiers"] = []any{map[string]any{"identifier": "x", "type": "DOI", "relation": "Likes"}}
		}, "relation"},
		{func(m map[string]any) { m["creators"] = []any{map[string]any{"given_name": "Ada"}} }, "creators[0]"},
		{func(m map[string]any) { m["colour"] = "blue" }, "colour"},
	} {
		m := map[string]any{}
		for k, v := range meta {
			m[k] = v
		}
		bad.change(m)
		r := e.postJSON(ds+"/metadata", curator, m)
		if r.Status != http.StatusBadRequest || !strings.Contains(e.apiErr(r).Error.Message, bad.want) {
			t.Errorf("bad metadata (%s): %d %s", bad.want, r.Status, clipBody(r.Body))
		}
	}

	cit := e.get(ds+"/versions/1/citation", member)
	e.mustStatus(cit, http.StatusOK, "citation")
	validateCFF(t, cit.Body)
	for _, want := range []string{"family-names: Quill", "orcid: https://orcid.org/0000-0002-1825-0097", "name: Harbour Lab", "license: CC-BY-4.0", "walk-in clinic", "invented walk-in clinic"} {
		if !strings.Contains(string(cit.Body), want) {
			t.Errorf("CITATION.cff lacks %q:\n%s", want, cit.Body)
		}
	}

	b := e.get(ds+"/versions/1/bundle", member)
	e.mustStatus(b, http.StatusOK, "bundle")
	if b.Header.Get("ETag") == before {
		t.Error("the bundle's ETag did not change with its metadata")
	}
	files := map[string][]byte{}
	tr := tar.NewReader(bytes.NewReader(b.Body))
	for {
		h, err := tr.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		files[h.Name], _ = io.ReadAll(tr)
	}
	var dc struct {
		Types    map[string]string `json:"types"`
		Creators []struct {
			Name            string `json:"name"`
			NameType        string `json:"nameType"`
			NameIdentifiers []struct {
				NameIdentifier, NameIdentifierScheme string
			} `json:"nameIdentifiers"`
		} `json:"creators"`
		Publisher  struct{ Name string } `json:"publisher"`
		RightsList []struct {
			RightsIdentifier, RightsIdentifierScheme string
		} `json:"rightsList"`
		Subjects []struct{ Subject string } `json:"subjects"`
		Related  []struct {
			RelatedIdentifier, RelatedIdentifierType, RelationType string
		} `json:"relatedIdentifiers"`
		Alternate []struct{ AlternateIdentifier string } `json:"alternateIdentifiers"`
	}
	if err := json.Unmarshal(files["datacite.json"], &dc); err != nil {
		t.Fatalf("datacite.json: %v\n%s", err, files["datacite.json"])
	}
	if dc.Types["resourceTypeGeneral"] != "Dataset" || len(dc.Creators) != 2 || dc.Creators[0].Name != "Quill, Ada" || dc.Creators[0].NameType != "Personal" ||
		len(dc.Creators[0].NameIdentifiers) != 1 || dc.Creators[0].NameIdentifiers[0].NameIdentifierScheme != "ORCID" || dc.Creators[1].NameType != "Organizational" ||
		dc.Publisher.Name != "Harbour Lab" || len(dc.RightsList) != 1 || dc.RightsList[0].RightsIdentifier != "CC-BY-4.0" || dc.RightsList[0].RightsIdentifierScheme != "SPDX" ||
		len(dc.Subjects) != 2 || len(dc.Related) != 2 || dc.Related[0].RelationType != "IsDocumentedBy" || len(dc.Alternate) != 1 || !strings.HasPrefix(dc.Alternate[0].AlternateIdentifier, "sha256:") {
		t.Errorf("datacite.json:\n%s", files["datacite.json"])
	}
	readme := string(files["README.md"])
	for _, want := range []string{"CC-BY-4.0", "IsDocumentedBy DOI `10.1234/protocol.5`", "invented walk-in clinic", "duckdb -c", "UTC"} {
		if !strings.Contains(readme, want) {
			t.Errorf("README.md lacks %q", want)
		}
	}
	validateCFF(t, files["CITATION.cff"])
}
