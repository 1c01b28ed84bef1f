package server

import (
	"bytes"
	"compress/gzip"
	"context"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// Raw identifier values planted in the test files; none may leave ingest.
const (
	rawCase     = "RAW-ID-7731"
	rawResource = "RAW-RES-4410"
	rawSubject  = "RAW-SUBJ-5092"
)

// wardProfile reads a semicolon export with local wall-clock times.
const wardProfile = `format: csv
delimiter: ";"
timezone: Europe/Amsterdam
fields:
  site: {value: "ward-3"}
  case_id: "Patient"
  subject_id: "Person"
  resource_id: "Staff"
  activity: "Task"
  event_type:
    column: "Step"
    codes: {REG: arrival, BEGIN: start, DONE: complete}
  occurred_at:
    column: "When"
    layout: "%Y-%m-%d %H:%M:%S"
`

const wardHeader = "Patient;Person;Staff;Task;Step;When\n"

// wardRows returns n valid rows whose times start at day (1-28) of March
// 2024, so that files of different days differ. Row i belongs to case
// rawCase-i/3 so the planted value is in every file.
func wardRows(day, n int) string {
	var b strings.Builder
	steps := []string{"REG", "BEGIN", "DONE"}
	for i := range n {
		fmt.Fprintf(&b, "%s-%d;%s-%d;%s;triage;%s;2024-03-%02d %02d:%02d:00\n",
			rawCase, i/3, rawSubject, i/3, rawResource, steps[i%3], day, 8+i/60, i%60)
	}
	return b.String()
}

func wardFile(day, n int) []byte { return []byte(wardHeader + wardRows(day, n)) }

func gz(t *testing.T, b []byte) []byte {
	t.Helper()
	var buf bytes.Buffer
	w := gzip.NewWriter(&buf)
	if _, err := w.Write(b); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// TestBadUploads sends broken files through HTTP. Each must be refused
// with the right status and a JSON error that names the rule (and line and
// column where there is one), must create no version, and must leave the
// server able to take a good upload at once. Afterwards no raw identifier
// may be found anywhere the server wrote or answered.
func TestBadUploads(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	// A profile naming a column the files do not have.
	e.createDataset("ward", "renamed", strings.Replace(wardProfile, `case_id: "Patient"`, `case_id: "PatientNr"`, 1))
	e.createDataset("ward", "locked", wardProfile)
	partner := e.partner("ward/events", "ward/renamed")

	// A file whose gzip stream is cut off in the middle.
	whole := gz(t, wardFile(27, 600))
	truncated := whole[:len(whole)/2]

	badTS := []byte(wardHeader + strings.ReplaceAll(wardRows(26, 9), "2024-03-26 ", "26.03.2024T"))
	unknownCode := []byte(wardHeader + strings.NewReplacer(";REG;", ";ZZZ;", ";BEGIN;", ";ZZZ;", ";DONE;", ";ZZZ;").Replace(wardRows(25, 9)))
	badUTF8 := []byte(wardHeader + wardRows(24, 2) + rawCase + "-9\xff\xfe;p;" + rawResource + ";triage;REG;2024-03-24 09:00:00\n")
	commaFile := []byte(strings.ReplaceAll(string(wardFile(23, 3)), ";", ","))
	noStep := []byte("Patient;Person;Staff;Task;When\n" + rawCase + ";p;" + rawResource + ";triage;2024-03-22 08:00:00\n")
	noHeader := []byte(wardRows(21, 3))

	cases := []struct {
		name    string
		dataset string
		token   string
		data    []byte
		status  int
		code    string
		rule    string // file rule, or for 422 the rejection reason
		line    int64
		column  string
		words   []string             // the message must hold each
		good    func(day int) []byte // a good file for the dataset; default wardFile
	}{
		{name: "empty file", dataset: "events", data: nil, status: 400, code: "file_invalid", rule: schema.RuleEmptyFile, words: []string{"empty"}},
		{name: "header only", dataset: "events", data: []byte(wardHeader), status: 400, code: "file_invalid", rule: schema.RuleNoRows, words: []string{"no data rows"}},
		{name: "wrong delimiter", dataset: "events", data: commaFile, status: 400, code: "file_invalid", rule: schema.RuleMissingColumn, line: 1, column: "Patient", words: []string{"delimiter", `";"`}},
		{name: "missing required column", dataset: "events", data: noStep, status: 400, code: "file_invalid", rule: schema.RuleMissingColumn, line: 1, column: "Step", words: []string{"event_type", `"Step"`}},
		{name: "no header row", dataset: "events", data: noHeader, status: 400, code: "file_invalid", rule: schema.RuleMissingColumn, line: 1, column: "Patient", words: []string{"header row missing"}},
		{name: "bad UTF-8 in a data row", dataset: "events", data: badUTF8, status: 400, code: "file_invalid", rule: schema.RuleEncoding, line: 4, column: "Patient", words: []string{"UTF-8"}},
		{name: "unknown event code on every row", dataset: "events", data: unknownCode, status: 422, code: "rejected", rule: string(schema.ReasonUnknownCode), line: 2, column: "Step", words: []string{"no valid rows", "unknown_code 9", `export.csv:2 column "Step"`}},
		{name: "unparseable timestamps on every row", dataset: "events", data: badTS, status: 422, code: "rejected", rule: string(schema.ReasonBadTimestamp), line: 2, column: "When", words: []string{"no valid rows", "bad_timestamp 9", `export.csv:2 column "When"`}},
		{name: "profile column missing from the file", dataset: "renamed", data: wardFile(20, 3), status: 400, code: "file_invalid", rule: schema.RuleMissingColumn, line: 1, column: "PatientNr", words: []string{"PatientNr"},
			good: func(day int) []byte {
				return []byte(strings.Replace(string(wardFile(day, 6)), "Patient;", "PatientNr;", 1))
			}},
		{name: "truncated gzip", dataset: "events", data: truncated, status: 400, code: "file_invalid", rule: schema.RuleCompression, line: 292, words: []string{"gzip"}},
		{name: "dataset the token may not write", dataset: "locked", data: wardFile(19, 3), status: 403, code: "forbidden", words: []string{"upload"}},
	}
	day := 1
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e := e.in(t)
			before := e.versions("ward", tc.dataset)
			latest := e.dataset("ward", tc.dataset).Latest
			tok := tc.token
			if tok == "" {
				tok = partner
			}
			r := e.upload("ward", tc.dataset, tok, "export.csv", tc.data)
			if r.Status != tc.status {
				t.Fatalf("status %d, want %d; body %s", r.Status, tc.status, clipBody(r.Body))
			}
			b := e.apiErr(r)
			if b.Error.Code != tc.code {
				t.Errorf("code %q, want %q", b.Error.Code, tc.code)
			}
			for _, w := range tc.words {
				if !strings.Contains(b.Error.Message, w) {
					t.Errorf("message %q does not hold %q", b.Error.Message, w)
				}
			}
			switch tc.status {
			case http.StatusBadRequest:
				if b.Error.Rule != tc.rule || !strings.Contains(b.Error.Message, tc.rule) {
					t.Errorf("rule %q (message %q), want %q named in both", b.Error.Rule, b.Error.Message, tc.rule)
				}
				if b.Error.Line != tc.line || b.Error.Column != tc.column {
					t.Errorf("at line %d column %q, want line %d column %q", b.Error.Line, b.Error.Column, tc.line, tc.column)
				}
				if tc.line > 0 && !strings.Contains(b.Error.Message, fmt.Sprintf("export.csv:%d", tc.line)) {
					t.Errorf("message %q does not name file:line", b.Error.Message)
				}
				if u := b.Error.Upload; u == nil || u.Status != catalog.UploadFailed || u.Error == nil || u.Error.Rule != tc.rule {
					t.Errorf("upload record in the error = %+v, want status failed, rule %s", u, tc.rule)
				}
			case http.StatusUnprocessableEntity:
				if b.Error.Rule != tc.rule || b.Error.Line != tc.line || b.Error.Column != tc.column {
					t.Errorf("rule %q at line %d column %q, want %q at line %d column %q", b.Error.Rule, b.Error.Line, b.Error.Column, tc.rule, tc.line, tc.column)
				}
				u := b.Error.Upload
				if u == nil || u.Status != catalog.UploadRejected || u.Report == nil {
					t.Fatalf("upload record in the error = %+v, want status rejected with a report", u)
				}
				if len(u.Report.Rejections) != 1 || string(u.Report.Rejections[0].Reason) != tc.rule || u.Report.Rows.Rejected != u.Report.Rows.Total {
					t.Errorf("report rejections %+v rows %+v, want every row rejected for %s", u.Report.Rejections, u.Report.Rows, tc.rule)
				}
			}

			// Nothing was stored.
			if after := e.versions("ward", tc.dataset); len(after) != len(before) {
				t.Errorf("versions went from %d to %d", len(before), len(after))
			}
			if got := e.dataset("ward", tc.dataset).Latest; got != latest {
				t.Errorf("latest version went from %d to %d", latest, got)
			}

			// And the server goes on serving: a good upload works.
			if tc.status == http.StatusForbidden {
				return
			}
			day++
			good := wardFile(day, 6)
			if tc.good != nil {
				good = tc.good(day)
			}
			ok := e.upload("ward", tc.dataset, partner, "good.csv", good)
			e.mustStatus(ok, http.StatusCreated, "good upload after the bad one")
			var res api.UploadResult
			e.decode(ok, &res)
			if res.Version == nil || res.Version.Number != latest+1 {
				t.Errorf("good upload made %+v, want version %d", res.Version, latest+1)
			}
		})
	}

	// A few bad timestamps among many good rows are rejected rows, not a
	// rejected upload (1 of 30 is under the default 5% threshold).
	t.Run("some unparseable timestamps", func(t *testing.T) {
		e := e.in(t)
		rows := strings.Split(strings.TrimSuffix(wardRows(28, 30), "\n"), "\n")
		rows[10] = strings.Replace(rows[10], "2024-03-28 ", "28/03/2024 ", 1)
		r := e.upload("ward", "events", partner, "mixed.csv", []byte(wardHeader+strings.Join(rows, "\n")+"\n"))
		e.mustStatus(r, http.StatusCreated, "upload with one bad timestamp")
		var res api.UploadResult
		e.decode(r, &res)
		rep := res.Upload.Report
		if rep == nil || rep.Rows.Accepted != 29 || rep.Rows.Rejected != 1 || len(rep.Rejections) != 1 ||
			rep.Rejections[0].Reason != schema.ReasonBadTimestamp || rep.Rejections[0].Samples[0].Line != 12 {
			t.Fatalf("report %+v, want 29 accepted, 1 rejected for bad_timestamp on line 12", rep)
		}
	})

	checkNoRawIDs(t, e, rawCase, rawResource, rawSubject)
}

// TestBadProfiles checks that a dataset whose profile is wrong is refused
// at creation with 400 and a message naming the problem.
func TestBadProfiles(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	cases := []struct {
		name    string
		profile string
		words   []string
	}{
		{"invalid YAML", "format: csv\nfields: [unclosed\n", []string{"profile", "YAML"}},
		{"unknown field", wardProfile + "  patient_age: \"Age\"\n", []string{"fields.patient_age", "not a schema field"}},
		{"unknown top-level key", "colour: blue\n" + wardProfile, []string{"colour", "unknown key"}},
		{"unparseable timestamp layout", strings.Replace(wardProfile, `"%Y-%m-%d %H:%M:%S"`, `"%Y-%m-%d %Q"`, 1), []string{"fields.occurred_at.layout"}},
		{"unknown zone", strings.Replace(wardProfile, "Europe/Amsterdam", "Europe/Atlantis", 1), []string{"timezone", "Europe/Atlantis"}},
		{"required field unmapped", strings.Replace(wardProfile, `  case_id: "Patient"`+"\n", "", 1), []string{"case_id"}},
		{"event code mapped to no event type", strings.Replace(wardProfile, "REG: arrival", "REG: landed", 1), []string{"landed", "not an event type"}},
	}
	for i, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e := e.in(t)
			name := fmt.Sprintf("bad%d", i)
			r := e.postJSON("/api/v1/projects/ward/datasets", e.admin, map[string]any{"name": name, "profile": tc.profile})
			if r.Status != http.StatusBadRequest {
				t.Fatalf("status %d, want 400; body %s", r.Status, clipBody(r.Body))
			}
			b := e.apiErr(r)
			for _, w := range tc.words {
				if !strings.Contains(b.Error.Message, w) {
					t.Errorf("message %q does not hold %q", b.Error.Message, w)
				}
			}
			if g := e.get("/api/v1/projects/ward/datasets/"+name, e.admin); g.Status != http.StatusNotFound {
				t.Errorf("dataset %s exists after a refused creation (status %d)", name, g.Status)
			}
		})
	}
	// Control: the good profile is taken.
	e.createDataset("ward", "good", wardProfile)
}

// checkNoRawIDs fails if any raw value appears in a response body, in the
// server log, in the bbolt file or in any file under the data folder, and
// decodes every stored Parquet file to check that its identifiers are
// pseudonyms (zstd pages would hide a raw value from a byte search).
func checkNoRawIDs(t *testing.T, e *testEnv, raws ...string) {
	t.Helper()
	for _, raw := range raws {
		for i, b := range e.allBodies() {
			if bytes.Contains(b, []byte(raw)) {
				t.Errorf("response body %d holds raw %q: %s", i, raw, clipBody(b))
			}
		}
		if bytes.Contains(e.log.Bytes(), []byte(raw)) {
			t.Errorf("server log holds raw %q", raw)
		}
	}
	db, err := os.ReadFile(filepath.Join(e.dir, "catalog.db"))
	if err != nil {
		t.Fatal(err)
	}
	for _, raw := range raws {
		if bytes.Contains(db, []byte(raw)) {
			t.Errorf("catalog.db holds raw %q", raw)
		}
	}
	files := 0
	err = filepath.WalkDir(e.dir, func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		files++
		for _, raw := range raws {
			if bytes.Contains(b, []byte(raw)) {
				t.Errorf("%s holds raw %q", path, raw)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if files < 2 {
		t.Errorf("walked only %d files under the data folder", files)
	}
	parquets := 0
	err = e.store.Blobs().List(context.Background(), func(info blob.Info) error {
		r, err := e.store.Blobs().Open(context.Background(), info.ID)
		if err != nil {
			return err
		}
		data, err := io.ReadAll(r)
		r.Close()
		if err != nil {
			return err
		}
		if !bytes.HasPrefix(data, []byte("PAR1")) {
			// A case group's derived blob (pseudonymized events sorted
			// by case, keys, states): grepped for raw ids above.
			return nil
		}
		parquets++
		return catalog.ReadSnapshot(bytes.NewReader(data), int64(len(data)), func(ev *schema.Event) error {
			for _, v := range []string{ev.CaseID, ev.SubjectID, ev.ResourceID} {
				if v != "" && (len(v) != anonymize.PseudonymLen || !anonymize.IsPseudonym(v)) {
					t.Errorf("stored identifier %q is not a 26-character pseudonym", v)
					return fmt.Errorf("stop")
				}
				for _, raw := range raws {
					if strings.Contains(v, raw) {
						t.Errorf("stored identifier holds raw %q", raw)
					}
				}
			}
			if ev.CaseID == "" {
				t.Errorf("stored event has no case id")
			}
			return nil
		})
	})
	if err != nil {
		t.Fatal(err)
	}
	if parquets == 0 {
		t.Errorf("no Parquet file in the blob store to check")
	}
}

// TestHeaderlessFilePrivacy sends files whose header row is missing and
// whose first data row does not look like data to the reader's heuristic
// (no cell reads as a number or a timestamp under the profile): the error
// must still not repeat that row's cells, which are raw identifiers.
//
// It fails today: schema's missing-column and duplicate-column messages
// quote the "header" cells when the row does not look like data, and the
// catalog stores the message in the upload record. Remove the Skip once
// schema no longer quotes them.
func TestHeaderlessFilePrivacy(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	row := func(step string) string {
		// A timestamp the profile's layout does not read, so nothing in
		// the row looks like data.
		return rawCase + ";" + rawSubject + ";" + rawResource + ";triage;" + step + ";24.03.2024 09:00\n"
	}
	files := map[string]string{
		"six cells":      row("REG") + row("DONE"),
		"one cell":       rawCase + "\n" + rawCase + "\n",
		"wrong delim":    strings.ReplaceAll(row("REG"), ";", ",") + strings.ReplaceAll(row("DONE"), ";", ","),
		"repeated value": rawCase + ";" + rawCase + ";" + rawResource + ";triage;REG;24.03.2024 09:00\n",
	}
	for name, f := range files {
		r := e.upload("ward", "events", e.admin, "noheader.csv", []byte(f))
		if r.Status != http.StatusBadRequest {
			t.Errorf("%s: status %d, want 400", name, r.Status)
		}
	}
	e.mustStatus(e.upload("ward", "events", e.admin, "good.csv", wardFile(2, 3)), http.StatusCreated, "good upload")
	checkNoRawIDs(t, e, rawCase, rawResource, rawSubject)
}
