package export

import (
	"errors"
	"fmt"
	"regexp"
	"strconv"
	"time"

	"github.com/goccy/go-yaml"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// ErrBadCitation is wrapped by Citation's errors: the input lacks what a
// citation needs.
var ErrBadCitation = errors.New("bad citation input")

// Author is one author of a cited dataset: an entity (Name, such as the
// lab or the data-owning organisation) or a person (GivenNames and
// FamilyNames).
type Author struct {
	Name        string // an entity's name; when set, the person fields are ignored
	GivenNames  string
	FamilyNames string
	Affiliation string // persons only
	ORCID       string // persons only: https://orcid.org/... URL
	Email       string
}

// CitationInput is what a CITATION.cff says about one version.
type CitationInput struct {
	Title      string    // required: the dataset's title
	Dataset    string    // "project/dataset"
	Version    int       // required: the version number
	SnapshotID string    // required: hex SHA-256 of the manifest's canonical JSON
	Released   time.Time // required: the version's creation time; its UTC date is date-released
	Authors    []Author  // required: at least one
	Abstract   string    // default: a sentence naming dataset and version
	Keywords   []string  // default: a few generic ones
	URL        string    // optional landing page (http or https)
	DOI        string    // optional, without resolver (10.xxxx/...)
	License    string    // optional SPDX identifier
	// Publisher (DataCite's publisher) and Related (DataCite's related
	// identifiers) go to the bundle's datacite.json; CITATION.cff has no
	// member for either.
	Publisher string
	Related   []catalog.RelatedIdentifier
}

// CitationFromMetadata returns c with what the dataset's metadata gives:
// its creators as the authors, its description as the abstract, its
// keywords, licence, publisher and related identifiers. Members m leaves
// empty keep c's.
func CitationFromMetadata(c CitationInput, m *catalog.DatasetMetadata) CitationInput {
	if m == nil {
		return c
	}
	if len(m.Creators) > 0 {
		c.Authors = nil
		for _, cr := range m.Creators {
			c.Authors = append(c.Authors, Author{Name: cr.Name, GivenNames: cr.GivenName, FamilyNames: cr.FamilyName, Affiliation: cr.Affiliation, ORCID: cr.ORCID})
		}
	}
	if m.Description != "" {
		c.Abstract = m.Description
	}
	if len(m.Keywords) > 0 {
		c.Keywords = m.Keywords
	}
	if m.License != "" {
		c.License = m.License
	}
	if m.Publisher != "" {
		c.Publisher = m.Publisher
	}
	c.Related = m.RelatedIdentifiers
	return c
}

// cff is a CITATION.cff document; field order is output order.
type cff struct {
	CFFVersion   string          `yaml:"cff-version"`
	Message      string          `yaml:"message"`
	Type         string          `yaml:"type"`
	Title        string          `yaml:"title"`
	Version      string          `yaml:"version"`
	DateReleased string          `yaml:"date-released"`
	Abstract     string          `yaml:"abstract"`
	Authors      []cffAuthor     `yaml:"authors"`
	Identifiers  []cffIdentifier `yaml:"identifiers"`
	Keywords     []string        `yaml:"keywords"`
	URL          string          `yaml:"url,omitempty"`
	DOI          string          `yaml:"doi,omitempty"`
	License      string          `yaml:"license,omitempty"`
}

type cffAuthor struct {
	Name        string `yaml:"name,omitempty"`
	GivenNames  string `yaml:"given-names,omitempty"`
	FamilyNames string `yaml:"family-names,omitempty"`
	Affiliation string `yaml:"affiliation,omitempty"`
	ORCID       string `yaml:"orcid,omitempty"`
	Email       string `yaml:"email,omitempty"`
}

type cffIdentifier struct {
	Type        string `yaml:"type"`
	Value       string `yaml:"value"`
	Description string `yaml:"description"`
}

var hex64 = regexp.MustCompile(`^[0-9a-f]{64}$`)

// Citation returns a CITATION.cff (Citation File Format 1.2.0) for one
// version of a dataset: type dataset, its title, version, release date,
// authors, abstract and keywords, and the snapshot id as an identifier of
// type "other" (with the DOI too when given). It fails, wrapping
// ErrBadCitation, when a required input is missing.
func Citation(c CitationInput) ([]byte, error) {
	switch {
	case c.Title == "":
		return nil, fmt.Errorf("citation: no title: %w", ErrBadCitation)
	case c.Version <= 0:
		return nil, fmt.Errorf("citation: version %d: want 1 or more: %w", c.Version, ErrBadCitation)
	case !hex64.MatchString(c.SnapshotID):
		return nil, fmt.Errorf("citation: snapshot id: want 64 lowercase hex digits: %w", ErrBadCitation)
	case c.Released.IsZero():
		return nil, fmt.Errorf("citation: no release time: %w", ErrBadCitation)
	case len(c.Authors) == 0:
		return nil, fmt.Errorf("citation: no authors: %w", ErrBadCitation)
	}
	doc := cff{
		CFFVersion:   "1.2.0",
		Message:      "If you use this dataset, please cite it using the metadata from this file, including its version and snapshot id.",
		Type:         "dataset",
		Title:        c.Title,
		Version:      strconv.Itoa(c.Version),
		DateReleased: c.Released.UTC().Format(time.DateOnly),
		Abstract:     c.Abstract,
		Keywords:     c.Keywords,
		URL:          c.URL,
		DOI:          c.DOI,
		License:      c.License,
	}
	ref := c.Dataset
	if ref == "" {
		ref = c.Title
	}
	if doc.Abstract == "" {
		doc.Abstract = fmt.Sprintf("Version %d of the service-event dataset %s: pseudonymized operational events (arrivals, waits, service, departures) in the common service-event schema, as an immutable snapshot.", c.Version, ref)
	}
	if len(doc.Keywords) == 0 {
		doc.Keywords = []string{"service events", "operational data", "queueing", "pseudonymized data"}
	}
	for i, a := range c.Authors {
		ca := cffAuthor{Email: a.Email}
		if a.Name != "" {
			ca.Name = a.Name
		} else {
			if a.FamilyNames == "" && a.GivenNames == "" {
				return nil, fmt.Errorf("citation: author %d has no name: %w", i+1, ErrBadCitation)
			}
			ca.GivenNames, ca.FamilyNames, ca.Affiliation, ca.ORCID = a.GivenNames, a.FamilyNames, a.Affiliation, a.ORCID
		}
		doc.Authors = append(doc.Authors, ca)
	}
	doc.Identifiers = append(doc.Identifiers, cffIdentifier{
		Type:        "other",
		Value:       "sha256:" + c.SnapshotID,
		Description: fmt.Sprintf("Snapshot id of version %d of %s: the SHA-256 of the version manifest's canonical JSON (manifest.json).", c.Version, ref),
	})
	if c.DOI != "" {
		doc.Identifiers = append(doc.Identifiers, cffIdentifier{Type: "doi", Value: c.DOI, Description: "The DOI of this version."})
	}
	b, err := yaml.MarshalWithOptions(&doc, yaml.IndentSequence(true))
	if err != nil {
		return nil, fmt.Errorf("citation: %w", err)
	}
	return b, nil
}
