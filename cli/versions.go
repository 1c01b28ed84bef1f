package cli

import (
	"net/url"
	"strconv"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

func newVersionsCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "versions PROJECT/DATASET",
		Short: "List a dataset's versions",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, cl, err := e.connect(args[0], false)
			if err != nil {
				return err
			}
			// The server answers a page at a time; follow the pages.
			hs := []catalog.Version{}
			after := 0
			for {
				var page api.VersionsPage
				q := url.Values{"limit": {strconv.Itoa(catalog.MaxVersionsPage)}, "after": {strconv.Itoa(after)}}
				if err := cl.getJSONQuery(cmd.Context(), r.path()+"/versions", q, &page); err != nil {
					return err
				}
				hs = append(hs, page.Versions...)
				if page.NextAfter == nil || *page.NextAfter <= after {
					break
				}
				after = *page.NextAfter
			}
			if e.json {
				return writeJSON(e.stdout, hs)
			}
			return versionsTable(e, hs)
		},
	}
}
