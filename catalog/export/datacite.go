package export

import (
	"encoding/json"
	"fmt"
	"strconv"
	"time"
)

// DataCite returns the bundle's datacite.json: the version described in
// the DataCite Metadata Schema's JSON form (its property names as the
// DataCite REST API spells them; schema 4.x, from memory of its
// documentation), ready to be registered with a DOI: titles, creators
// (persons with their ORCID iD and affiliation, or organisations),
// publisher, publication year, resource type Dataset, version, the
// snapshot id as an alternate identifier, subjects (keywords), rights (the
// SPDX licence), the abstract, related identifiers and the creation date.
// Its input is Citation's, and so are its checks.
func DataCite(c CitationInput) ([]byte, error) {
	if _, err := Citation(c); err != nil {
		return nil, err
	}
	type (
		obj  = map[string]any
		list = []any
	)
	var creators list
	for _, a := range c.Authors {
		if a.Name != "" {
			creators = append(creators, obj{"name": a.Name, "nameType": "Organizational"})
			continue
		}
		cr := obj{"name": a.FamilyNames + ", " + a.GivenNames, "nameType": "Personal", "givenName": a.GivenNames, "familyName": a.FamilyNames}
		if a.Affiliation != "" {
			cr["affiliation"] = list{obj{"name": a.Affiliation}}
		}
		if a.ORCID != "" {
			cr["nameIdentifiers"] = list{obj{"nameIdentifier": a.ORCID, "nameIdentifierScheme": "ORCID", "schemeUri": "https://orcid.org"}}
		}
		creators = append(creators, cr)
	}
	publisher := c.Publisher
	if publisher == "" {
		publisher = c.Authors[0].Name
		if publisher == "" {
			publisher = c.Authors[0].GivenNames + " " + c.Authors[0].FamilyNames
		}
	}
	ref := c.Dataset
	if ref == "" {
		ref = c.Title
	}
	abstract := c.Abstract
	if abstract == "" {
		abstract = fmt.Sprintf("Version %d of the service-event dataset %s: pseudonymized operational events (arrivals, waits, service, departures) in the common service-event schema, as an immutable snapshot.", c.Version, ref)
	}
	doc := obj{
		"schemaVersion":   "http://datacite.org/schema/kernel-4",
		"types":           obj{"resourceTypeGeneral": "Dataset", "resourceType": "Service-event log"},
		"titles":          list{obj{"title": c.Title}},
		"creators":        creators,
		"publisher":       obj{"name": publisher},
		"publicationYear": strconv.Itoa(c.Released.UTC().Year()),
		"version":         strconv.Itoa(c.Version),
		"alternateIdentifiers": list{obj{
			"alternateIdentifier":     "sha256:" + c.SnapshotID,
			"alternateIdentifierType": "SHA-256 of manifest.json (snapshot id)",
		}},
		"descriptions": list{obj{"description": abstract, "descriptionType": "Abstract"}},
		"dates":        list{obj{"date": c.Released.UTC().Format(time.RFC3339), "dateType": "Created"}},
		"formats":      list{"application/vnd.apache.parquet"},
	}
	if c.DOI != "" {
		doc["doi"] = c.DOI
	}
	if c.URL != "" {
		doc["url"] = c.URL
	}
	var subjects list
	for _, k := range c.Keywords {
		subjects = append(subjects, obj{"subject": k})
	}
	if len(subjects) > 0 {
		doc["subjects"] = subjects
	}
	if c.License != "" {
		doc["rightsList"] = list{obj{
			"rightsIdentifier":       c.License,
			"rightsIdentifierScheme": "SPDX",
			"schemeUri":              "https://spdx.org/licenses/",
			"rightsUri":              "https://spdx.org/licenses/" + c.License + ".html",
		}}
	}
	var related list
	for _, r := range c.Related {
		related = append(related, obj{"relatedIdentifier": r.Identifier, "relatedIdentifierType": r.Type, "relationType": r.Relation})
	}
	if len(related) > 0 {
		doc["relatedIdentifiers"] = related
	}
	b, err := json.MarshalIndent(doc, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("datacite: %w", err)
	}
	return append(b, '\n'), nil
}
