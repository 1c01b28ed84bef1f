package cli

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/server/api"
)

func newProjectCmd(e *env) *cobra.Command {
	c := &cobra.Command{Use: "project", Short: "Create, list, archive and delete projects"}
	var title string
	create := &cobra.Command{
		Use:   "create PROJECT",
		Short: "Create a project with its own pseudonym key (admin)",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cl, err := e.client()
			if err != nil {
				return err
			}
			var p api.Project
			if err := cl.postJSON(cmd.Context(), "/projects", api.CreateProject{Name: args[0], Title: title}, &p); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, p)
			}
			fmt.Fprintf(e.stdout, "created project %s (pseudonym key %s)\n", p.Name, p.KeyID)
			return nil
		},
	}
	create.Flags().StringVar(&title, "title", "", "human-readable title")
	list := &cobra.Command{
		Use:   "list",
		Short: "List the projects this token may read",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			cl, err := e.client()
			if err != nil {
				return err
			}
			var ps []api.Project
			if err := cl.getJSON(cmd.Context(), "/projects", &ps); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, ps)
			}
			// The title goes on a line of its own under its project, so
			// that the list fits 80 columns however long titles are.
			tb := table{head: []string{"PROJECT", "CREATED"}}
			for _, p := range ps {
				tb.add(p.Title, p.Name, stamp(p.CreatedAt))
			}
			return tb.write(e.stdout)
		},
	}
	c.AddCommand(create, list)
	c.AddCommand(newProjectChangeCmds(e)...)
	return c
}
