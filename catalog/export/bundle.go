package export

import (
	"archive/tar"
	"archive/zip"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// ErrFormat is returned by WriteBundle for an archive format other than
// "tar" or "zip".
var ErrFormat = errors.New("unknown bundle format")

// Bundle is one version of a dataset to package for a researcher.
type Bundle struct {
	Dataset *catalog.Dataset
	Version *catalog.Version // with its manifest
	// Manifest is the manifest as stored (Store.ManifestBytes), the bytes
	// whose SHA-256 is the snapshot id; Quality the version's quality
	// report as stored (Store.QualityReport), or nil for none.
	Manifest []byte
	Quality  []byte
	Open     Opener
	// Citation describes the version for CITATION.cff; its Dataset,
	// Version, SnapshotID and Released default to those of Version, its
	// Title to the dataset's title or reference.
	Citation CitationInput
	// KeySpans are the dataset's versions grouped by pseudonym key
	// generation (Store.KeySpans), for the dictionary's statement of which
	// versions are linkable; nil states the rule only.
	KeySpans []catalog.KeySpan
}

// The names of a bundle's entries besides data/<sha256>.parquet.
const (
	BundleReadme     = "README.md"
	BundleCitation   = "CITATION.cff"
	BundleDictionary = "DICTIONARY.md"
	BundleManifest   = "manifest.json"
	BundleQuality    = "quality.json"
	BundleSums       = "SHA256SUMS"
	BundleDataCite   = "datacite.json"
)

type entry struct {
	name string
	body []byte  // small entries, built in memory
	file blob.ID // or a snapshot file, streamed
	size int64
	sum  string
}

// WriteBundle writes b as a "tar" or "zip" archive to w, streaming the
// snapshot files. Entries, in this order: README.md, CITATION.cff,
// datacite.json, DICTIONARY.md, manifest.json (the manifest's canonical JSON, which hashes
// to the snapshot id), data/<sha256>.parquet for every file of the manifest
// (its stored bytes, checked against the id as they are copied) and
// SHA256SUMS (sha256sum -c format) over all the others. Every entry has
// mode 0644, owner 0 without names, and the version's creation time (to
// the second, UTC) as its modification time; zip entries are stored
// uncompressed with no extra timestamp fields. The same version with the
// same citation input (the dataset's metadata) always gives the same
// bytes.
func WriteBundle(ctx context.Context, w io.Writer, format string, b Bundle) error {
	if format != "tar" && format != "zip" {
		return fmt.Errorf("bundle: format %q: want tar or zip: %w", truncate(format), ErrFormat)
	}
	if b.Dataset == nil || b.Version == nil || b.Version.Manifest == nil || b.Manifest == nil || b.Open == nil {
		return fmt.Errorf("bundle: dataset, version, manifest and opener are required")
	}
	v := b.Version
	m := v.Manifest
	ci := b.Citation
	if ci.Dataset == "" {
		ci.Dataset = b.Dataset.Ref().String()
	}
	if ci.Version == 0 {
		ci.Version = v.Number
	}
	if ci.SnapshotID == "" {
		ci.SnapshotID = v.SnapshotID.String()
	}
	if ci.Released.IsZero() {
		ci.Released = m.CreatedAt
	}
	if ci.Title == "" {
		ci.Title = b.Dataset.Title
		if ci.Title == "" {
			ci.Title = b.Dataset.Ref().String()
		}
	}
	cite, err := Citation(ci)
	if err != nil {
		return fmt.Errorf("bundle: %w", err)
	}
	dict, err := dictionary(b.Dataset, v, b.Quality, b.KeySpans)
	if err != nil {
		return err
	}
	dc, err := DataCite(ci)
	if err != nil {
		return fmt.Errorf("bundle: %w", err)
	}
	ents := []*entry{
		{name: BundleReadme, body: readme(b.Dataset, v, b.Quality != nil, ci)},
		{name: BundleCitation, body: cite},
		{name: BundleDataCite, body: dc},
		{name: BundleDictionary, body: dict},
		{name: BundleManifest, body: b.Manifest},
	}
	if b.Quality != nil {
		ents = append(ents, &entry{name: BundleQuality, body: b.Quality})
	}
	for _, f := range m.Blobs() {
		ents = append(ents, &entry{name: f.Path, file: f.SHA256, size: f.Bytes, sum: f.SHA256.String()})
	}
	var sums bytes.Buffer
	for _, e := range ents {
		if e.body != nil {
			s := sha256.Sum256(e.body)
			e.sum, e.size = hex.EncodeToString(s[:]), int64(len(e.body))
		}
		fmt.Fprintf(&sums, "%s  %s\n", e.sum, e.name)
	}
	ents = append(ents, &entry{name: BundleSums, body: sums.Bytes(), size: int64(sums.Len())})

	mtime := m.CreatedAt.UTC().Truncate(time.Second)
	switch format {
	case "tar":
		return writeTar(ctx, w, ents, mtime, b.Open)
	default:
		return writeZip(ctx, w, ents, mtime, b.Open)
	}
}

// copyFile streams snapshot file e into w, checking size and hash.
func copyFile(ctx context.Context, w io.Writer, e *entry, open Opener) error {
	r, err := open(ctx, e.file)
	if err != nil {
		return fmt.Errorf("bundle: file %s: %w", e.file, err)
	}
	defer r.Close()
	h := sha256.New()
	n, err := io.Copy(io.MultiWriter(w, h), io.LimitReader(r, e.size+1))
	if err != nil {
		return fmt.Errorf("bundle: file %s: %w", e.file, err)
	}
	if n != e.size || !bytes.Equal(h.Sum(nil), e.file[:]) {
		return fmt.Errorf("bundle: file %s: stored bytes do not match the manifest (%d bytes, want %d): %w", e.file, n, e.size, blob.ErrCorrupt)
	}
	return nil
}

func writeTar(ctx context.Context, w io.Writer, ents []*entry, mtime time.Time, open Opener) error {
	tw := tar.NewWriter(w)
	for _, e := range ents {
		hdr := &tar.Header{
			Typeflag: tar.TypeReg,
			Name:     e.name,
			Size:     e.size,
			Mode:     0o644,
			ModTime:  mtime,
			Format:   tar.FormatUSTAR,
		}
		if err := tw.WriteHeader(hdr); err != nil {
			return fmt.Errorf("bundle: tar: %w", err)
		}
		if e.body != nil {
			if _, err := tw.Write(e.body); err != nil {
				return fmt.Errorf("bundle: tar: %w", err)
			}
		} else if err := copyFile(ctx, tw, e, open); err != nil {
			return err
		}
	}
	if err := tw.Close(); err != nil {
		return fmt.Errorf("bundle: tar: %w", err)
	}
	return nil
}

func writeZip(ctx context.Context, w io.Writer, ents []*entry, mtime time.Time, open Opener) error {
	zw := zip.NewWriter(w)
	date, clock := msDosTime(mtime)
	for _, e := range ents {
		// Modified stays zero: set, it makes archive/zip add an extended
		// timestamp field; the MS-DOS date and time alone say enough.
		//lint:ignore SA1019 the MS-DOS fields are the only way to a timestamp without the extended field
		fh := &zip.FileHeader{Name: e.name, Method: zip.Store, ModifiedDate: date, ModifiedTime: clock}
		fh.SetMode(0o644)
		ew, err := zw.CreateHeader(fh)
		if err != nil {
			return fmt.Errorf("bundle: zip: %w", err)
		}
		if e.body != nil {
			if _, err := ew.Write(e.body); err != nil {
				return fmt.Errorf("bundle: zip: %w", err)
			}
		} else if err := copyFile(ctx, ew, e, open); err != nil {
			return err
		}
	}
	if err := zw.Close(); err != nil {
		return fmt.Errorf("bundle: zip: %w", err)
	}
	return nil
}

// msDosTime encodes t (UTC) as an MS-DOS date and time (two-second
// resolution, years from 1980), as the ZIP format's local file header
// holds them (PKWARE APPNOTE.TXT, 4.4.6).
func msDosTime(t time.Time) (date, clock uint16) {
	t = t.UTC()
	if t.Year() < 1980 {
		t = time.Date(1980, 1, 1, 0, 0, 0, 0, time.UTC)
	}
	date = uint16(t.Day() + int(t.Month())<<5 + (t.Year()-1980)<<9)
	clock = uint16(t.Second()/2 + t.Minute()<<5 + t.Hour()<<11)
	return date, clock
}

func readme(d *catalog.Dataset, v *catalog.Version, withQuality bool, ci CitationInput) []byte {
	m := v.Manifest
	var b strings.Builder
	title := d.Title
	if title == "" {
		title = d.Ref().String()
	}
	fmt.Fprintf(&b, "# %s, version %d\n\n", title, v.Number)
	fmt.Fprintf(&b, "This bundle holds version %d of the dataset `%s` exactly as the catalog stores it: ", v.Number, d.Ref())
	b.WriteString("its snapshot files (Apache Parquet, zstd-compressed), its manifest, a data dictionary and a citation. ")
	b.WriteString("A version never changes: the same version, with the same dataset metadata, always gives the same bundle, byte for byte.\n\n")
	fmt.Fprintf(&b, "- Snapshot id: `%s`\n", v.SnapshotID)
	fmt.Fprintf(&b, "- Created: %s\n", m.CreatedAt.UTC().Format(time.RFC3339))
	fmt.Fprintf(&b, "- Events: %d in %d file(s)\n", m.Rows, len(m.Files))
	fmt.Fprintf(&b, "- Schema: service-event schema v%s (see %s)\n\n", m.SchemaVersion, BundleDictionary)
	if ci.Abstract != "" {
		b.WriteString(ci.Abstract + "\n\n")
	}
	b.WriteString("## Loading it\n\n")
	zone := d.Timezone
	if zone == "" {
		zone = "UTC"
	}
	fmt.Fprintf(&b, "`occurred_at` is an instant in UTC (Parquet TIMESTAMP(MICROS, UTC)). The dataset's wall clock is **%s**: ", zone)
	b.WriteString("each line below adds `local_time`, the same instant on that clock (its hour of day and day of week are the ones the site lived by). ")
	fmt.Fprintf(&b, "Every field is described in `%s`. Run a line in this folder (the one holding `data/`); read all files of `data/` together, they are one version.\n\n", BundleDictionary)
	for _, l := range LoadLines(zone) {
		fmt.Fprintf(&b, "%s (%s):\n\n    %s\n\n", l.Tool, l.Needs, l.Command)
	}
	if v.Manifest.CaseTable != nil {
		b.WriteString("The case table (one row per case) reads the same way from `cases/*.parquet`.\n\n")
	}
	b.WriteString("## Citing and licence\n\n")
	fmt.Fprintf(&b, "Cite this version with `%s` (Citation File Format) or `%s` (DataCite metadata, ready for a DOI); both name the snapshot id above.\n", BundleCitation, BundleDataCite)
	if ci.License != "" {
		fmt.Fprintf(&b, "The data is licensed under %s (SPDX identifier; https://spdx.org/licenses/%s.html), within the agreements named below.\n", ci.License, ci.License)
	}
	if len(ci.Related) > 0 {
		b.WriteString("\nRelated works:\n\n")
		for _, r := range ci.Related {
			fmt.Fprintf(&b, "- %s %s `%s`\n", r.Relation, r.Type, r.Identifier)
		}
	}
	b.WriteString("\n## Contents\n\n")
	fmt.Fprintf(&b, "- `%s`: the version's manifest, as stored when the version was made; the snapshot id is computed from these bytes.\n", BundleManifest)
	if withQuality {
		fmt.Fprintf(&b, "- `%s`: the version's full quality report (JSON; the manifest names its SHA-256).\n", BundleQuality)
	}
	b.WriteString("- `data/<sha256>.parquet`: the snapshot files; each is named by the SHA-256 of its bytes. Rows are sorted by `occurred_at` within a file; read all files of the manifest together for the whole version.\n")
	fmt.Fprintf(&b, "- `%s`: the fields, their types and the mapping profile and quality summary of the data.\n", BundleDictionary)
	fmt.Fprintf(&b, "- `%s`: how to cite this version (Citation File Format 1.2.0).\n", BundleCitation)
	fmt.Fprintf(&b, "- `%s`: the version described in the DataCite Metadata Schema (JSON).\n", BundleDataCite)
	fmt.Fprintf(&b, "- `%s`: the SHA-256 of every other file of the bundle.\n\n", BundleSums)
	b.WriteString("## Verifying\n\n")
	b.WriteString("In the folder the bundle was unpacked into:\n\n")
	fmt.Fprintf(&b, "    sha256sum -c %s\n\n", BundleSums)
	fmt.Fprintf(&b, "checks every file. The snapshot id is the SHA-256 of `%s` itself:\n\n", BundleManifest)
	fmt.Fprintf(&b, "    sha256sum %s\n\n", BundleManifest)
	b.WriteString("must print the snapshot id above, and every file listed in the manifest must be present under `data/` with its own SHA-256 as its name.\n\n")
	b.WriteString("## Caution\n\n")
	b.WriteString("The events describe the past operation of services (arrivals, waits, service, departures). ")
	b.WriteString("Identifiers (`case_id`, `subject_id`, `resource_id`) are pseudonyms, not raw values, but pseudonymized health data is still personal data: ")
	b.WriteString("use it only under the ethics approval and data-use agreement that cover your project and the law that applies where you work, ")
	b.WriteString("do not try to re-identify anyone, and do not link it to other data unless your approval allows it. ")
	b.WriteString("Summaries of this data describe past operations; they are not advice on the care of any patient.\n")
	return []byte(b.String())
}

func dictionary(d *catalog.Dataset, v *catalog.Version, report []byte, spans []catalog.KeySpan) ([]byte, error) {
	m := v.Manifest
	var b strings.Builder
	fmt.Fprintf(&b, "# Data dictionary: %s, version %d\n\n", d.Ref(), v.Number)
	fmt.Fprintf(&b, "Service-event schema v%s: one row per event of a case.\n\n", m.SchemaVersion)
	b.WriteString("| field | type | required | pseudonymized identifier | description |\n")
	b.WriteString("|---|---|---|---|---|\n")
	for _, f := range schema.FieldSpecs() {
		fmt.Fprintf(&b, "| `%s` | %s | %s | %s | %s |\n", f.Name, f.Type, yesNo(f.Required), yesNo(f.Identifier), f.Doc)
	}
	b.WriteString("\nAn empty optional field is stored as null. Pseudonymized identifiers are keyed HMACs: equal within a project, unrelated across projects, and not reversible without the project key.\n\n")
	b.WriteString("Event types: ")
	for i, t := range schema.EventTypes {
		if i > 0 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "`%s`", t)
	}
	b.WriteString(".\n\n## Mapping profile\n\n")
	fmt.Fprintf(&b, "- Profile revision: %d\n", d.Revision())
	fmt.Fprintf(&b, "- Profile hash: `%s`\n- Time zone of wall-clock times: %s\n- Pseudonym key id: `%s`\n\n", m.ProfileHash, d.Timezone, m.KeyID)
	b.WriteString(linkability(v, spans))
	if strings.TrimSpace(d.Profile) == "" {
		b.WriteString("The dataset uses the default profile: the source columns carry the schema's own field names.\n")
	} else {
		fence := "```"
		for strings.Contains(d.Profile, fence) {
			fence += "`"
		}
		fmt.Fprintf(&b, "The profile that maps partner exports into the schema:\n\n%syaml\n%s\n%s\n", fence, strings.TrimRight(d.Profile, "\n"), fence)
	}
	if m.CaseTable != nil {
		fmt.Fprintf(&b, "\n## Case table\n\n`%s`: one row per case over every file of the version (%d cases), in `case_id` order. A case is its case id within the dataset, however long it idles.\n\n", catalog.CasesPath(m.CaseTable.SHA256), m.CaseTable.Rows)
		b.WriteString("| column | type | description |\n|---|---|---|\n")
		for _, c := range cases.RowColumns {
			fmt.Fprintf(&b, "| `%s` | %s | %s |\n", c.Name, c.Type, c.Meaning)
		}
	}
	b.WriteString(attributeDictionary(m))
	b.WriteString("\n## Quality\n\n")
	q, err := qualitySummary(report)
	if err != nil {
		return nil, err
	}
	b.WriteString(q)
	return []byte(b.String()), nil
}

func yesNo(v bool) string {
	if v {
		return "yes"
	}
	return "no"
}

// qualitySummary renders the score, the rows and the per-dimension scores
// of the version's stored quality report from its JSON, so that fields
// added to the report later do not break it.
func qualitySummary(raw []byte) (string, error) {
	if raw == nil {
		return "No quality report was recorded for this version.\n", nil
	}
	var rep map[string]any
	if err := json.Unmarshal(raw, &rep); err != nil {
		return "", fmt.Errorf("bundle: quality: %w", err)
	}
	var b strings.Builder
	b.WriteString("Quality of the upload that made this version (scores from 0 to 100).\n\n")
	fmt.Fprintf(&b, "- Score: %s\n", scalar(rep["score"]))
	if rows, ok := rep["rows"].(map[string]any); ok {
		fmt.Fprintf(&b, "- Rows: %s\n", pairs(rows))
	}
	if dims, ok := rep["dimensions"].([]any); ok && len(dims) > 0 {
		b.WriteString("\n| dimension | score | details |\n|---|---|---|\n")
		for _, d := range dims {
			o, ok := d.(map[string]any)
			if !ok {
				continue
			}
			name := scalar(firstOf(o, "name", "dimension", "id"))
			rest := map[string]any{}
			for k, v := range o {
				if k != "name" && k != "dimension" && k != "id" && k != "score" {
					rest[k] = v
				}
			}
			fmt.Fprintf(&b, "| %s | %s | %s |\n", name, scalar(o["score"]), pairs(rest))
		}
	}
	return b.String(), nil
}

func firstOf(o map[string]any, keys ...string) any {
	for _, k := range keys {
		if v, ok := o[k]; ok {
			return v
		}
	}
	return nil
}

// pairs renders the scalar members of o as "k: v", sorted by key.
func pairs(o map[string]any) string {
	keys := make([]string, 0, len(o))
	for k, v := range o {
		switch v.(type) {
		case map[string]any, []any:
			continue
		}
		keys = append(keys, k)
	}
	slices.Sort(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = k + ": " + scalar(o[k])
	}
	return strings.Join(parts, ", ")
}

func scalar(v any) string {
	switch x := v.(type) {
	case nil:
		return "none"
	case float64:
		if x == float64(int64(x)) {
			return strconv.FormatInt(int64(x), 10)
		}
		return strconv.FormatFloat(x, 'f', 2, 64)
	case string:
		return strings.NewReplacer("|", "\\|", "\n", " ").Replace(x)
	case bool:
		return strconv.FormatBool(x)
	}
	return fmt.Sprint(v)
}

// linkability states which versions of the dataset share v's pseudonym
// key generation: between those an identifier has one pseudonym, so their
// cases can be joined; with any other, its pseudonyms are unrelated.
func linkability(v *catalog.Version, spans []catalog.KeySpan) string {
	var b strings.Builder
	b.WriteString("### Linkability of pseudonyms\n\n")
	id := v.Manifest.KeyID
	var same []int
	var other []string
	for _, sp := range spans {
		if sp.KeyID == id {
			same = sp.Versions
			continue
		}
		other = append(other, fmt.Sprintf("%s (key `%s`, generation %d)", versionList(sp.Versions), sp.KeyID, sp.Generation))
	}
	if spans == nil {
		b.WriteString("Versions whose manifest names the same pseudonym key id are linkable with this one (an identifier has the same pseudonym in all of them); versions naming another key id are not.\n\n")
		return b.String()
	}
	fmt.Fprintf(&b, "Linkable with this version (same key generation: an identifier has the same pseudonym): versions %s.\n", versionList(same))
	if len(other) == 0 {
		b.WriteString("Every version of the dataset is of this key generation.\n\n")
		return b.String()
	}
	fmt.Fprintf(&b, "Not linkable (another key generation: the same identifier has an unrelated pseudonym): versions %s.\n\n", strings.Join(other, "; "))
	return b.String()
}

func versionList(vs []int) string {
	out := make([]string, len(vs))
	for i, n := range vs {
		out[i] = fmt.Sprint(n)
	}
	return strings.Join(out, ", ")
}
