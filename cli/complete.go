package cli

import (
	"context"
	"net/url"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// Shell completion: cobra's completion command writes the script for
// bash, zsh, fish or PowerShell; the script calls flowcat back to
// complete commands and flags (cobra's own) and, from the server in
// --server or FLOWCAT_SERVER with the token in --token or FLOWCAT_TOKEN,
// projects, datasets and versions wherever a command takes them. Without
// a server or on any error it offers nothing rather than failing.

// completionTimeout bounds a completion's requests: a shell waits on it.
const completionTimeout = 3 * time.Second

// flagValues are the fixed values of flags, by flag name; "format" by
// command.
var flagValues = map[string][]string{
	"role":    {"admin", "curator", "member", "partner"},
	"mode":    {"append", "replace-window", "replace-all"},
	"changes": {"refuse", "correct"},
}

var formatValues = map[string][]string{
	"export": {"parquet", "csv"},
	"bundle": {"tar", "zip"},
}

// addCompletion gives every command under root completion of its
// dataset references (from its usage line) and of flags with known
// values. Commands that set their own completion keep it.
func addCompletion(root *cobra.Command, e *env) {
	var walk func(c *cobra.Command)
	walk = func(c *cobra.Command) {
		kinds := positionals(c.Use)
		if c.ValidArgsFunction == nil && len(kinds) > 0 {
			c.ValidArgsFunction = func(cmd *cobra.Command, args []string, toComplete string) ([]cobra.Completion, cobra.ShellCompDirective) {
				if len(args) >= len(kinds) {
					return nil, cobra.ShellCompDirectiveNoFileComp
				}
				kind := kinds[len(args)]
				if vals, ok := strings.CutPrefix(kind, "values:"); ok {
					return strings.Split(vals, ","), cobra.ShellCompDirectiveNoFileComp
				}
				switch kind {
				case "project":
					if cmd.Name() == "create" {
						return nil, cobra.ShellCompDirectiveNoFileComp // a new name
					}
					return e.completeProjects(cmd, false)
				case "dataset":
					return e.completeRef(cmd, toComplete, false)
				case "version":
					return e.completeRef(cmd, toComplete, true)
				case "file":
					return nil, cobra.ShellCompDirectiveDefault
				}
				return nil, cobra.ShellCompDirectiveNoFileComp
			}
		}
		for name, vals := range flagValues {
			if c.LocalNonPersistentFlags().Lookup(name) != nil {
				c.RegisterFlagCompletionFunc(name, cobra.FixedCompletions(vals, cobra.ShellCompDirectiveNoFileComp))
			}
		}
		if vals, ok := formatValues[c.Name()]; ok && c.Flags().Lookup("format") != nil {
			c.RegisterFlagCompletionFunc("format", cobra.FixedCompletions(vals, cobra.ShellCompDirectiveNoFileComp))
		}
		if c.LocalNonPersistentFlags().Lookup("project") != nil {
			c.RegisterFlagCompletionFunc("project", func(cmd *cobra.Command, _ []string, _ string) ([]cobra.Completion, cobra.ShellCompDirective) {
				return e.completeProjects(cmd, false)
			})
		}
		if f := c.LocalNonPersistentFlags().Lookup("dataset"); f != nil && c.Name() != "demo" {
			c.RegisterFlagCompletionFunc("dataset", func(cmd *cobra.Command, _ []string, toComplete string) ([]cobra.Completion, cobra.ShellCompDirective) {
				return e.completeRef(cmd, toComplete, false)
			})
		}
		for _, sub := range c.Commands() {
			walk(sub)
		}
	}
	walk(root)
}

// positionals reads a usage line ("diff PROJECT/DATASET@A PROJECT/DATASET@B
// [filters]") into the kinds of its positional arguments: project,
// dataset, version (a dataset with an optional @VERSION), file (FILE or
// DIR), "values:a,b" (a|b) or "" (an identifier, nothing to offer). Flags
// and their values, and bracketed options, are skipped; so is everything
// after a "|" (an alternative form).
func positionals(use string) []string {
	fields := strings.Fields(use)
	var kinds []string
	bracket := false
	for i := 1; i < len(fields); i++ {
		f := fields[i]
		switch {
		case bracket || strings.HasPrefix(f, "["):
			bracket = !strings.HasSuffix(f, "]") // an option, to its closing bracket
		case f == "|":
			return kinds
		case strings.HasPrefix(f, "-"):
			if i+1 < len(fields) && !strings.HasPrefix(fields[i+1], "-") && fields[i+1] != "|" {
				i++ // the flag's value: DIR, FILE, TEXT
			}
		case strings.HasPrefix(f, "PROJECT/DATASET") && strings.Contains(f, "@"):
			kinds = append(kinds, "version")
		case strings.HasPrefix(f, "PROJECT/DATASET"):
			kinds = append(kinds, "dataset")
		case f == "PROJECT":
			kinds = append(kinds, "project")
		case f == "FILE" || f == "DIR":
			kinds = append(kinds, "file")
		case strings.Contains(f, "|") && strings.ToLower(f) == f:
			kinds = append(kinds, "values:"+strings.ReplaceAll(f, "|", ","))
		default:
			kinds = append(kinds, "") // an identifier (JTI, KID): nothing to offer
		}
	}
	return kinds
}

// completionClient is a client for a completion, or nil when no server or
// token is configured.
func (e *env) completionClient(cmd *cobra.Command) (*client, context.Context, context.CancelFunc) {
	cl, err := e.client()
	if err != nil {
		return nil, nil, nil
	}
	ctx, cancel := context.WithTimeout(cmd.Context(), completionTimeout)
	return cl, ctx, cancel
}

// completeProjects offers the projects the token may read; with slash,
// each followed by "/" and no space, to go on with a dataset.
func (e *env) completeProjects(cmd *cobra.Command, slash bool) ([]cobra.Completion, cobra.ShellCompDirective) {
	cl, ctx, cancel := e.completionClient(cmd)
	if cl == nil {
		return nil, cobra.ShellCompDirectiveNoFileComp
	}
	defer cancel()
	var ps []api.Project
	if err := cl.getJSON(ctx, "/projects", &ps); err != nil {
		return nil, cobra.ShellCompDirectiveNoFileComp
	}
	var out []cobra.Completion
	for _, p := range ps {
		if slash {
			out = append(out, cobra.CompletionWithDesc(p.Name+"/", p.Title))
		} else {
			out = append(out, cobra.CompletionWithDesc(p.Name, p.Title))
		}
	}
	dir := cobra.ShellCompDirectiveNoFileComp
	if slash {
		dir |= cobra.ShellCompDirectiveNoSpace
	}
	return out, dir
}

// completeRef completes PROJECT/DATASET, and with withVersion
// PROJECT/DATASET@VERSION (numbers and latest), from what is typed.
func (e *env) completeRef(cmd *cobra.Command, toComplete string, withVersion bool) ([]cobra.Completion, cobra.ShellCompDirective) {
	project, rest, hasSlash := strings.Cut(toComplete, "/")
	if !hasSlash {
		return e.completeProjects(cmd, true)
	}
	cl, ctx, cancel := e.completionClient(cmd)
	if cl == nil {
		return nil, cobra.ShellCompDirectiveNoFileComp
	}
	defer cancel()
	dataset, _, hasAt := strings.Cut(rest, "@")
	if !hasAt {
		var ds []catalog.Dataset
		if err := cl.getJSON(ctx, "/projects/"+url.PathEscape(project)+"/datasets", &ds); err != nil {
			return nil, cobra.ShellCompDirectiveNoFileComp
		}
		var out []cobra.Completion
		for _, d := range ds {
			out = append(out, cobra.CompletionWithDesc(project+"/"+d.Name, d.Title))
		}
		return out, cobra.ShellCompDirectiveNoFileComp
	}
	if !withVersion {
		return nil, cobra.ShellCompDirectiveNoFileComp
	}
	r := ref{Project: project, Dataset: dataset}
	var page api.VersionsPage
	q := url.Values{"limit": {strconv.Itoa(catalog.MaxVersionsPage)}}
	if err := cl.getJSONQuery(ctx, r.path()+"/versions", q, &page); err != nil {
		return nil, cobra.ShellCompDirectiveNoFileComp
	}
	base := project + "/" + dataset + "@"
	out := []cobra.Completion{cobra.CompletionWithDesc(base+"latest", "the newest published version")}
	for _, v := range page.Versions {
		out = append(out, cobra.CompletionWithDesc(base+strconv.Itoa(v.Number),
			string(v.State)+", "+minute(v.CreatedAt)+" UTC, "+strconv.FormatInt(v.Rows, 10)+" rows"))
	}
	return out, cobra.ShellCompDirectiveNoFileComp | cobra.ShellCompDirectiveKeepOrder
}
