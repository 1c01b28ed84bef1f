package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"net/url"
	"regexp"
	"slices"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/github/go-spdx/v2/spdxexp"
	bolt "go.etcd.io/bbolt"
)

// DatasetMetadata is what a curator says about a dataset for citing and
// publishing it, in the terms of the DataCite Metadata Schema (4.x):
// creators, publisher, rights (a licence as an SPDX identifier),
// description, subjects (keywords) and related identifiers. Every version
// of the dataset is cited with it (CITATION.cff, the bundle's
// datacite.json and README).
type DatasetMetadata struct {
	Creators           []Creator           `json:"creators,omitempty"`
	Publisher          string              `json:"publisher,omitempty"`   // who makes the data available (default: the citation author)
	License            string              `json:"license,omitempty"`     // an SPDX license identifier, e.g. CC-BY-4.0
	Description        string              `json:"description,omitempty"` // an abstract
	Keywords           []string            `json:"keywords,omitempty"`
	RelatedIdentifiers []RelatedIdentifier `json:"related_identifiers,omitempty"`
	UpdatedAt          time.Time           `json:"updated_at,omitzero"`
	UpdatedBy          string              `json:"updated_by,omitempty"`
}

// Creator is one creator of a dataset: an organisation (Name) or a person
// (GivenName and FamilyName, optionally Affiliation and an ORCID iD).
type Creator struct {
	Name        string `json:"name,omitempty"`
	GivenName   string `json:"given_name,omitempty"`
	FamilyName  string `json:"family_name,omitempty"`
	Affiliation string `json:"affiliation,omitempty"`
	ORCID       string `json:"orcid,omitempty"` // https://orcid.org/0000-0000-0000-0000
}

// RelatedIdentifier links the dataset to another work: its identifier,
// the identifier's type and the relation, with DataCite's vocabularies
// (relatedIdentifierType and relationType).
type RelatedIdentifier struct {
	Identifier string `json:"identifier"`
	Type       string `json:"type"`     // e.g. DOI, URL
	Relation   string `json:"relation"` // e.g. IsSupplementTo, IsDerivedFrom, References
}

// Limits of DatasetMetadata; SetDatasetMetadata refuses more (ErrInvalid).
const (
	MaxCreators        = 100
	MaxKeywords        = 50
	MaxRelated         = 100
	MaxDescription     = 10000 // characters
	maxMetadataField   = 500   // characters of any other text
	bucketMetadataName = "dataset_metadata"
)

// DataCite Metadata Schema 4.x vocabularies, taken from memory of the
// schema's documentation.
var (
	RelatedIdentifierTypes = []string{"ARK", "arXiv", "bibcode", "CSTR", "DOI", "EAN13", "EISSN", "Handle", "IGSN", "ISBN", "ISSN", "ISTC", "LISSN", "LSID", "PMID", "PURL", "RRID", "UPC", "URL", "URN", "w3id"}
	RelationTypes          = []string{
		"IsCitedBy", "Cites", "IsSupplementTo", "IsSupplementedBy", "IsContinuedBy", "Continues",
		"IsDescribedBy", "Describes", "HasMetadata", "IsMetadataFor", "HasVersion", "IsVersionOf",
		"IsNewVersionOf", "IsPreviousVersionOf", "IsPartOf", "HasPart", "IsPublishedIn",
		"IsReferencedBy", "References", "IsDocumentedBy", "Documents", "IsCompiledBy", "Compiles",
		"IsVariantFormOf", "IsOriginalFormOf", "IsIdenticalTo", "IsReviewedBy", "Reviews",
		"IsDerivedFrom", "IsSourceOf", "IsRequiredBy", "Requires", "IsObsoletedBy", "Obsoletes",
		"IsCollectedBy", "Collects", "HasTranslation", "IsTranslationOf",
	}
)

// ORCID iD: four groups of four digits, the last character a digit or X
// (ORCID's documented form); the checksum is checked too (ISO 7064 11,2).
var orcidRe = regexp.MustCompile(`^https://orcid\.org/(\d{4}-\d{4}-\d{4}-\d{3}[\dX])$`)

// Normalize trims m's text and puts the licence in its SPDX spelling;
// Validate then checks it.
func (m *DatasetMetadata) Normalize() {
	for i := range m.Creators {
		c := &m.Creators[i]
		c.Name, c.GivenName, c.FamilyName = strings.TrimSpace(c.Name), strings.TrimSpace(c.GivenName), strings.TrimSpace(c.FamilyName)
		c.Affiliation, c.ORCID = strings.TrimSpace(c.Affiliation), strings.TrimSpace(c.ORCID)
		if id, ok := strings.CutPrefix(c.ORCID, "orcid.org/"); ok {
			c.ORCID = "https://orcid.org/" + id
		}
	}
	m.Publisher, m.Description = strings.TrimSpace(m.Publisher), strings.TrimSpace(m.Description)
	m.License = strings.TrimSpace(m.License)
	if ok, id := spdxexp.ActiveLicense(m.License); ok {
		m.License = id
	}
	var kw []string
	for _, k := range m.Keywords {
		if k = strings.TrimSpace(k); k != "" && !slices.Contains(kw, k) {
			kw = append(kw, k)
		}
	}
	m.Keywords = kw
	for i := range m.RelatedIdentifiers {
		r := &m.RelatedIdentifiers[i]
		r.Identifier, r.Type, r.Relation = strings.TrimSpace(r.Identifier), strings.TrimSpace(r.Type), strings.TrimSpace(r.Relation)
	}
}

// Validate checks m; its error wraps ErrInvalid and names the member.
func (m *DatasetMetadata) Validate() error {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("metadata: "+format+": %w", append(args, ErrInvalid)...)
	}
	text := func(what, s string, max int) error {
		if utf8.RuneCountInString(s) > max {
			return bad("%s: longer than %d characters", what, max)
		}
		if strings.ContainsFunc(s, func(r rune) bool { return r < 0x20 && r != '\n' && r != '\t' }) {
			return bad("%s: holds a control character", what)
		}
		return nil
	}
	if len(m.Creators) > MaxCreators {
		return bad("creators: more than %d", MaxCreators)
	}
	for i, c := range m.Creators {
		what := fmt.Sprintf("creators[%d]", i)
		if c.Name == "" && (c.GivenName == "" || c.FamilyName == "") {
			return bad("%s: give name (an organisation) or given_name and family_name (a person)", what)
		}
		if c.Name != "" && (c.GivenName != "" || c.FamilyName != "" || c.ORCID != "") {
			return bad("%s: an organisation (name) takes no given_name, family_name or orcid", what)
		}
		for _, f := range []string{c.Name, c.GivenName, c.FamilyName, c.Affiliation} {
			if err := text(what, f, maxMetadataField); err != nil {
				return err
			}
		}
		if c.ORCID != "" {
			sm := orcidRe.FindStringSubmatch(c.ORCID)
			if sm == nil || !orcidChecksum(sm[1]) {
				return bad("%s: orcid %q: want https://orcid.org/ and an ORCID iD with a valid check digit", what, clipText(c.ORCID))
			}
		}
	}
	if m.License != "" {
		if ok, _ := spdxexp.ActiveLicense(m.License); !ok {
			return bad("license %q: not an SPDX license identifier (such as CC-BY-4.0, CC0-1.0, ODbL-1.0)", clipText(m.License))
		}
	}
	if err := text("publisher", m.Publisher, maxMetadataField); err != nil {
		return err
	}
	if err := text("description", m.Description, MaxDescription); err != nil {
		return err
	}
	if len(m.Keywords) > MaxKeywords {
		return bad("keywords: more than %d", MaxKeywords)
	}
	for _, k := range m.Keywords {
		if err := text("keywords", k, 100); err != nil {
			return err
		}
	}
	if len(m.RelatedIdentifiers) > MaxRelated {
		return bad("related_identifiers: more than %d", MaxRelated)
	}
	for i, r := range m.RelatedIdentifiers {
		what := fmt.Sprintf("related_identifiers[%d]", i)
		if r.Identifier == "" {
			return bad("%s: no identifier", what)
		}
		if err := text(what, r.Identifier, maxMetadataField); err != nil {
			return err
		}
		if !slices.Contains(RelatedIdentifierTypes, r.Type) {
			return bad("%s: type %q: want one of %s", what, clipText(r.Type), strings.Join(RelatedIdentifierTypes, ", "))
		}
		if !slices.Contains(RelationTypes, r.Relation) {
			return bad("%s: relation %q: want a DataCite relationType such as IsSupplementTo, IsDerivedFrom, References, IsDocumentedBy", what, clipText(r.Relation))
		}
		switch r.Type {
		case "DOI":
			if !strings.HasPrefix(r.Identifier, "10.") || !strings.Contains(r.Identifier, "/") {
				return bad("%s: DOI %q: want the DOI itself, 10.prefix/suffix, without a resolver", what, clipText(r.Identifier))
			}
		case "URL":
			u, err := url.Parse(r.Identifier)
			if err != nil || (u.Scheme != "https" && u.Scheme != "http") || u.Host == "" {
				return bad("%s: URL %q: want an http or https URL", what, clipText(r.Identifier))
			}
		}
	}
	return nil
}

// orcidChecksum checks an ORCID iD's last character (ISO 7064 MOD 11-2,
// the algorithm ORCID documents for its identifiers).
func orcidChecksum(id string) bool {
	digits := strings.ReplaceAll(id, "-", "")
	total := 0
	for _, c := range digits[:15] {
		total = (total + int(c-'0')) * 2
	}
	r := (12 - total%11) % 11
	want := byte('0' + r)
	if r == 10 {
		want = 'X'
	}
	return digits[15] == want
}

func clipText(s string) string {
	if len(s) > 80 {
		return s[:80] + "..."
	}
	return s
}

// SetDatasetMetadata normalizes, validates and stores the metadata of a
// dataset, replacing what it had. It fails with ErrNotFound for no such
// dataset and ErrInvalid for bad metadata.
func (s *Store) SetDatasetMetadata(ctx context.Context, project, dataset string, m DatasetMetadata, by string) (*DatasetMetadata, error) {
	m.Normalize()
	if err := m.Validate(); err != nil {
		return nil, err
	}
	m.UpdatedAt, m.UpdatedBy = s.opt.Now().UTC(), by
	key := []byte(project + "/" + dataset)
	err := s.db.Update(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketDatasets).Get(key) == nil {
			return fmt.Errorf("dataset %s/%s: %w", project, dataset, ErrNotFound)
		}
		b, err := tx.CreateBucketIfNotExists([]byte(bucketMetadataName))
		if err != nil {
			return err
		}
		var old DatasetMetadata
		if v := b.Get(key); v != nil {
			if err := json.Unmarshal(v, &old); err != nil {
				return fmt.Errorf("dataset %s/%s: stored metadata: %w", project, dataset, err)
			}
		}
		if err := putJSON(b, key, &m); err != nil {
			return err
		}
		return appendAudit(tx, withActor(ctx, AuditEntry{At: m.UpdatedAt, By: by, Action: "dataset.metadata", Project: project,
			Dataset: dataset, Target: string(key), Detail: metadataChanges(&old, &m)}))
	})
	if err != nil {
		return nil, err
	}
	return &m, nil
}

// metadataChanges names the members of the metadata that differ between
// old and m, in JSON order: the audit entry's detail (names only: the
// values, persons' names among them, stay in the metadata).
func metadataChanges(old, m *DatasetMetadata) string {
	var changed []string
	for _, f := range []struct {
		name string
		a, b any
	}{
		{"creators", old.Creators, m.Creators},
		{"publisher", old.Publisher, m.Publisher},
		{"license", old.License, m.License},
		{"description", old.Description, m.Description},
		{"keywords", old.Keywords, m.Keywords},
		{"related_identifiers", old.RelatedIdentifiers, m.RelatedIdentifiers},
	} {
		a, _ := json.Marshal(f.a)
		b, _ := json.Marshal(f.b)
		if !bytes.Equal(a, b) && !(isEmptyJSON(a) && isEmptyJSON(b)) {
			changed = append(changed, f.name)
		}
	}
	if len(changed) == 0 {
		return "no member changed"
	}
	return "set " + strings.Join(changed, ", ")
}

// isEmptyJSON: an absent member, as its stored form leaves it out.
func isEmptyJSON(b []byte) bool {
	s := string(b)
	return s == "null" || s == "[]" || s == `""`
}

// DatasetMetadata returns a dataset's metadata: the zero value when none
// was set, ErrNotFound for no such dataset.
func (s *Store) DatasetMetadata(ctx context.Context, project, dataset string) (*DatasetMetadata, error) {
	var m DatasetMetadata
	key := []byte(project + "/" + dataset)
	err := s.db.View(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketDatasets).Get(key) == nil {
			return fmt.Errorf("dataset %s/%s: %w", project, dataset, ErrNotFound)
		}
		b := tx.Bucket([]byte(bucketMetadataName))
		if b == nil || b.Get(key) == nil {
			return nil
		}
		return getJSON(b, key, &m, "metadata of "+project+"/"+dataset)
	})
	if err != nil {
		return nil, err
	}
	return &m, nil
}
