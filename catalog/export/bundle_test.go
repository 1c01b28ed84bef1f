package export

import (
	"archive/tar"
	"archive/zip"
	"bufio"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"io"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/goccy/go-yaml"
	"github.com/santhosh-tekuri/jsonschema/v6"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/quality"
)

func bundleFixture(t *testing.T) (*env, Bundle) {
	t.Helper()
	e, vs := fixture(t, 100)
	ds, err := e.s.Dataset(context.Background(), "er", "visits")
	if err != nil {
		t.Fatal(err)
	}
	mb, err := e.s.ManifestBytes(context.Background(), vs[2])
	if err != nil {
		t.Fatal(err)
	}
	rep, err := e.s.QualityReport(context.Background(), vs[2])
	if err != nil {
		t.Fatal(err)
	}
	return e, Bundle{
		Dataset: ds, Version: vs[2], Manifest: mb, Quality: rep, Open: e.opener(),
		Citation: CitationInput{Authors: []Author{{Name: "Flow Research Lab"}, {GivenNames: "Ada", FamilyNames: "Quill", Affiliation: "Quillon Bay Health"}}},
	}
}

func TestBundleTarAndZip(t *testing.T) {
	e, b := bundleFixture(t)
	m := b.Version.Manifest
	var rep quality.Report
	if err := json.Unmarshal(b.Quality, &rep); err != nil {
		t.Fatal(err)
	}
	mtime := m.CreatedAt.UTC().Truncate(time.Second)
	for _, format := range []string{"tar", "zip"} {
		t.Run(format, func(t *testing.T) {
			var out [2]bytes.Buffer
			for i := range out {
				if err := WriteBundle(context.Background(), &out[i], format, b); err != nil {
					t.Fatal(err)
				}
			}
			if !bytes.Equal(out[0].Bytes(), out[1].Bytes()) {
				t.Fatal("two bundles of the same version differ")
			}
			files := map[string][]byte{}
			var names []string
			switch format {
			case "tar":
				tr := tar.NewReader(bytes.NewReader(out[0].Bytes()))
				for {
					h, err := tr.Next()
					if err == io.EOF {
						break
					}
					if err != nil {
						t.Fatal(err)
					}
					if !h.ModTime.Equal(mtime) || h.Mode != 0o644 || h.Uid != 0 || h.Gid != 0 || h.Uname != "" || h.Gname != "" || h.Typeflag != tar.TypeReg {
						t.Errorf("%s: header %+v", h.Name, h)
					}
					body, _ := io.ReadAll(tr)
					files[h.Name] = body
					names = append(names, h.Name)
				}
			case "zip":
				zr, err := zip.NewReader(bytes.NewReader(out[0].Bytes()), int64(out[0].Len()))
				if err != nil {
					t.Fatal(err)
				}
				for _, f := range zr.File {
					if len(f.Extra) != 0 || f.Method != zip.Store || f.Mode() != 0o644 || !f.Modified.Equal(mtime) {
						t.Errorf("%s: extra %x method %d mode %v modified %v", f.Name, f.Extra, f.Method, f.Mode(), f.Modified)
					}
					rc, err := f.Open()
					if err != nil {
						t.Fatal(err)
					}
					body, err := io.ReadAll(rc) // checks the CRC-32
					rc.Close()
					if err != nil {
						t.Fatal(err)
					}
					files[f.Name] = body
					names = append(names, f.Name)
				}
			}
			wantNames := []string{BundleReadme, BundleCitation, BundleDataCite, BundleDictionary, BundleManifest, BundleQuality}
			for _, f := range m.Files {
				wantNames = append(wantNames, "data/"+f.SHA256.String()+".parquet")
			}
			if m.CaseTable == nil {
				t.Fatal("the version has no case table")
			}
			wantNames = append(wantNames, "cases/"+m.CaseTable.SHA256.String()+".parquet", BundleSums)
			if strings.Join(names, " ") != strings.Join(wantNames, " ") {
				t.Fatalf("entries %v, want %v", names, wantNames)
			}
			// SHA256SUMS lines as sha256sum writes them: hex digest, two
			// spaces (text mode), name (GNU coreutils manual, sha2 utilities).
			sc := bufio.NewScanner(bytes.NewReader(files[BundleSums]))
			checked := 0
			for sc.Scan() {
				sum, name, ok := strings.Cut(sc.Text(), "  ")
				if !ok {
					t.Fatalf("SHA256SUMS line %q", sc.Text())
				}
				got := sha256.Sum256(files[name])
				if hex.EncodeToString(got[:]) != sum {
					t.Errorf("%s: checksum mismatch", name)
				}
				checked++
			}
			if checked != len(wantNames)-1 {
				t.Errorf("SHA256SUMS checks %d files, want %d", checked, len(wantNames)-1)
			}
			ms := sha256.Sum256(files[BundleManifest])
			if hex.EncodeToString(ms[:]) != b.Version.SnapshotID.String() {
				t.Error("manifest.json does not hash to the snapshot id")
			}
			if !bytes.Equal(files[BundleManifest], b.Manifest) {
				t.Error("manifest.json is not the stored manifest")
			}
			if qs := sha256.Sum256(files[BundleQuality]); m.Quality == nil || qs != m.Quality.SHA256 {
				t.Error("quality.json does not hash to the report the manifest names")
			}
			for _, f := range m.Files {
				r, err := e.s.Blobs().Open(context.Background(), f.SHA256)
				if err != nil {
					t.Fatal(err)
				}
				stored, _ := io.ReadAll(r)
				r.Close()
				if !bytes.Equal(stored, files["data/"+f.SHA256.String()+".parquet"]) {
					t.Errorf("data file %s differs from the stored snapshot", f.SHA256)
				}
			}
			readme := string(files[BundleReadme])
			for _, want := range []string{b.Version.SnapshotID.String(), "sha256sum -c SHA256SUMS", "personal data", "ethics approval", "data-use agreement", "not advice on the care of any patient"} {
				if !strings.Contains(readme, want) {
					t.Errorf("README lacks %q", want)
				}
			}
			dict := string(files[BundleDictionary])
			if golden, err := os.ReadFile("testdata/dictionary-fields.md"); err != nil {
				t.Fatal(err)
			} else if !strings.Contains(dict, "\n\n"+string(golden)+"\nAn empty optional field") {
				t.Errorf("DICTIONARY.md's field table is not testdata/dictionary-fields.md:\n%s", dict)
			}
			for _, want := range []string{"| `case_id` | string (UTF-8) | yes | yes |", "| `occurred_at` | timestamp, microseconds, UTC", "| `queue` | string (UTF-8) | no | no |", "| `instance_id` | string (UTF-8) | no | yes | One execution of an activity", "- Score: ", "default profile"} {
				if !strings.Contains(dict, want) {
					t.Errorf("DICTIONARY.md lacks %q:\n%s", want, dict)
				}
			}
			// Every dimension of the report, whatever it is called, gets a row.
			for _, d := range rep.Dimensions {
				if !strings.Contains(dict, "| "+d.Name+" | ") {
					t.Errorf("DICTIONARY.md has no row for quality dimension %s", d.Name)
				}
			}
			if len(rep.Dimensions) == 0 {
				t.Error("the fixture's report has no dimensions")
			}
			if !bytes.Contains(files[BundleCitation], []byte(b.Version.SnapshotID.String())) {
				t.Error("CITATION.cff does not name the snapshot id")
			}
		})
	}
	if err := WriteBundle(context.Background(), io.Discard, "rar", b); !errors.Is(err, ErrFormat) {
		t.Errorf("format rar: %v", err)
	}
}

func TestBundleRefusesCorruptBlob(t *testing.T) {
	_, b := bundleFixture(t)
	// Claim a wrong size for the first file: the copy must fail.
	v := *b.Version
	v.Manifest.Files = append([]catalog.FileEntry(nil), v.Manifest.Files...)
	v.Manifest.Files[0].Bytes--
	b.Version = &v
	if err := WriteBundle(context.Background(), io.Discard, "tar", b); err == nil {
		t.Error("a file that does not match its manifest entry was bundled")
	}
}

func TestCitationValidatesAgainstCFFSchema(t *testing.T) {
	// The schema is the CFF 1.2.0 JSON Schema (testdata/README.md). It is
	// draft-07, under which jsonschema/v6 asserts "format" (date, uri).
	f, err := os.Open("testdata/cff-1.2.0.schema.json")
	if err != nil {
		t.Fatal(err)
	}
	doc, err := jsonschema.UnmarshalJSON(f)
	f.Close()
	if err != nil {
		t.Fatal(err)
	}
	c := jsonschema.NewCompiler()
	if err := c.AddResource("cff.json", doc); err != nil {
		t.Fatal(err)
	}
	sch, err := c.Compile("cff.json")
	if err != nil {
		t.Fatal(err)
	}
	in := CitationInput{
		Title: "Walk-in clinic visits", Dataset: "er/visits", Version: 3,
		SnapshotID: strings.Repeat("ab", 32), Released: time.Date(2026, 6, 1, 23, 30, 0, 0, time.FixedZone("x", -3600)),
		Authors:  []Author{{Name: "Flow Research Lab"}, {GivenNames: "Ada", FamilyNames: "Quill", ORCID: "https://orcid.org/0000-0002-1825-0097"}},
		Keywords: []string{"emergency department", "waiting times"},
		URL:      "https://catalog.example.org/er/visits/3", DOI: "10.5281/zenodo.1234567", License: "CC-BY-4.0",
	}
	for _, tc := range []struct {
		name string
		mod  func(*CitationInput)
	}{
		{"full", func(*CitationInput) {}},
		{"minimal", func(c *CitationInput) {
			c.Keywords, c.URL, c.DOI, c.License, c.Authors = nil, "", "", "", c.Authors[:1]
		}},
		{"awkward title", func(c *CitationInput) { c.Title = "Visits: \"north\" & south, #1 - 2026\nnight" }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ci := in
			tc.mod(&ci)
			out, err := Citation(ci)
			if err != nil {
				t.Fatal(err)
			}
			again, _ := Citation(ci)
			if !bytes.Equal(out, again) {
				t.Error("Citation is not deterministic")
			}
			var v any
			if err := yaml.Unmarshal(out, &v); err != nil {
				t.Fatalf("goccy/go-yaml cannot parse:\n%s\n%v", out, err)
			}
			// Through JSON, so numbers and maps take the types the
			// validator expects.
			js, err := json.Marshal(v)
			if err != nil {
				t.Fatal(err)
			}
			inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(js))
			if err != nil {
				t.Fatal(err)
			}
			if err := sch.Validate(inst); err != nil {
				t.Fatalf("CITATION.cff is not valid CFF 1.2.0:\n%s\n%v", out, err)
			}
			m := v.(map[string]any)
			if m["cff-version"] != "1.2.0" || m["type"] != "dataset" || m["version"] != "3" || m["date-released"] != "2026-06-02" || m["title"] != ci.Title {
				t.Errorf("fields %v", m)
			}
		})
	}
	// The validator does catch a bad document (a date that is no date).
	bad := map[string]any{"cff-version": "1.2.0", "message": "m", "title": "t", "authors": []any{map[string]any{"name": "x"}}, "date-released": "2026-13-01"}
	if err := sch.Validate(bad); err == nil {
		t.Error("the schema accepts a month 13")
	}
	for _, ci := range []CitationInput{{}, {Title: "t", Version: 1, SnapshotID: "xyz", Released: time.Now(), Authors: []Author{{Name: "x"}}}, {Title: "t", Version: 1, SnapshotID: in.SnapshotID, Released: time.Now()}} {
		if _, err := Citation(ci); !errors.Is(err, ErrBadCitation) {
			t.Errorf("Citation(%+v) = %v, want ErrBadCitation", ci, err)
		}
	}
}
