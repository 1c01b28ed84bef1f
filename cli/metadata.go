package cli

import (
	"bytes"
	"encoding/json"
	"os"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// newMetadataCmd reads or replaces a dataset's citation metadata.
func newMetadataCmd(e *env) *cobra.Command {
	var file string
	c := &cobra.Command{
		Use:   "metadata PROJECT/DATASET [--set FILE]",
		Short: "Print a dataset's citation metadata, or replace it from a JSON file (curator)",
		Long: `A dataset's metadata, in DataCite's terms, is carried into every version's CITATION.cff and
into bundles (datacite.json, README.md). The JSON file:

  {"creators": [{"given_name": "Ada", "family_name": "Byron", "affiliation": "Harbour Lab",
                 "orcid": "https://orcid.org/0000-0002-1825-0097"}, {"name": "Harbour Lab"}],
   "publisher": "Harbour Lab",
   "license": "CC-BY-4.0",
   "description": "Arrivals, waits and services of ...",
   "keywords": ["emergency department", "queueing"],
   "related_identifiers": [{"identifier": "10.1234/protocol", "type": "DOI", "relation": "IsDocumentedBy"}]}

license is an SPDX identifier; type and relation take DataCite's vocabularies
(relatedIdentifierType, relationType). --set replaces the whole metadata.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], false)
			if err != nil {
				return err
			}
			var m catalog.DatasetMetadata
			if file != "" {
				b, err := os.ReadFile(file)
				if err != nil {
					return usageErr("metadata: %v", err)
				}
				dec := json.NewDecoder(bytes.NewReader(b))
				dec.DisallowUnknownFields()
				if err := dec.Decode(&m); err != nil {
					return usageErr("metadata: %s: %v", file, err)
				}
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			var out catalog.DatasetMetadata
			if file != "" {
				err = cl.postJSON(cmd.Context(), r.path()+"/metadata", m, &out)
			} else {
				err = cl.getJSON(cmd.Context(), r.path()+"/metadata", &out)
			}
			if err != nil {
				return err
			}
			return writeJSON(e.stdout, out)
		},
	}
	c.Flags().StringVar(&file, "set", "", "replace the metadata with this JSON file")
	return c
}
