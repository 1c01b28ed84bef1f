package cli

import (
	"fmt"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/server"
)

func newTokenCmd(e *env) *cobra.Command {
	c := &cobra.Command{Use: "token", Short: "Issue API tokens (on the server host)"}
	var dir, role, subject, project string
	var datasets []string
	var ttl time.Duration
	issue := &cobra.Command{
		Use:   "issue --data DIR --role ROLE --subject NAME [--project P] [--dataset P/D] [--ttl 1h]",
		Short: "Print a signed token; works while the server runs on DIR",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if dir == "" || role == "" || subject == "" {
				return usageErr("token issue: --data, --role and --subject are required")
			}
			auth, err := dataDir(dir).authority()
			if err != nil {
				return err
			}
			if role == "partner" && project != "" {
				for i, d := range datasets {
					if !strings.Contains(d, "/") {
						datasets[i] = project + "/" + d
					}
				}
			}
			tok, err := auth.Issue(grantFor(role, subject, project, datasets, ttl))
			if err != nil {
				return usageErr("%v", err)
			}
			fmt.Fprintln(e.stdout, tok)
			return nil
		},
	}
	f := issue.Flags()
	f.StringVar(&dir, "data", "", "data directory of the server")
	f.StringVar(&role, "role", "", "admin, curator, member or partner")
	f.StringVar(&subject, "subject", "", "who the token is for (sub claim)")
	f.StringVar(&project, "project", "", "project (curator, member)")
	f.StringArrayVar(&datasets, "dataset", nil, "dataset P/D a partner may upload to (repeatable)")
	f.DurationVar(&ttl, "ttl", time.Hour, "lifetime")
	c.AddCommand(issue)
	return c
}

// grantFor keeps only the scope the role uses: a project for curators and
// members, datasets for partners, nothing for admins.
func grantFor(role, subject, project string, datasets []string, ttl time.Duration) server.Grant {
	g := server.Grant{Role: role, Subject: subject, TTL: ttl}
	switch role {
	case server.RoleCurator, server.RoleMember:
		g.Project = project
	case server.RolePartner:
		g.Datasets = datasets
	}
	return g
}
