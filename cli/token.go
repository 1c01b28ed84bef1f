package cli

import (
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/url"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// operator is the audit trail's "by" for commands run on the server host.
const operator = "operator (command line)"

func newTokenCmd(e *env) *cobra.Command {
	c := &cobra.Command{Use: "token", Short: "Issue, list and revoke API tokens; rotate and retire signing keys"}
	var dir, role, subject, project string
	var datasets, sites []string
	var replace bool
	var ttl time.Duration
	issue := &cobra.Command{
		Use:   "issue [--data DIR | --server URL --token T] --role ROLE --subject NAME [--project P] [--dataset P/D] [--ttl 1h]",
		Short: "Print a signed token, recorded in the catalog (spooled while the server runs on DIR); without --data through the API",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if role == "" || subject == "" {
				return usageErr("token issue: --role and --subject are required")
			}
			if dir == "" {
				return e.issueOverAPI(cmd, role, subject, project, datasets, sites, replace, ttl)
			}
			d := dataDir(dir)
			auth, err := d.authority()
			if err != nil {
				return err
			}
			if role == "partner" && project != "" {
				for i, ds := range datasets {
					if !strings.Contains(ds, "/") {
						datasets[i] = project + "/" + ds
					}
				}
			}
			g := grantFor(role, subject, project, datasets, ttl)
			g.Sites, g.Replace = sites, replace
			// Record the token (and audit the issue); while a server holds
			// the catalog, spool the record for the server to import (it
			// honours no EdDSA token it has no record of).
			st, err := d.openForTokens()
			if errors.Is(err, catalog.ErrLocked) {
				tok, c, ierr := auth.IssueClaims(g)
				if ierr != nil {
					return usageErr("%v", ierr)
				}
				kid, _ := server.HeaderKID(tok)
				if err := catalog.SpoolToken(d.tokenSpool(), operator, server.TokenRecord(c, kid), time.Now()); err != nil {
					return err
				}
				fmt.Fprintf(e.stderr, "note: a server holds the catalog; the token's record went to %s and the server records it (with its audit entry) on first use or at the next start or token list\n", d.tokenSpool())
				return e.printIssued(tok, false)
			}
			if err != nil {
				return err
			}
			defer st.Close()
			tok, err := auth.IssueRecorded(cmd.Context(), st, operator, g)
			if err != nil {
				return usageErr("%v", err)
			}
			return e.printIssued(tok, true)
		},
	}
	f := issue.Flags()
	f.StringVar(&dir, "data", "", "data directory of the server; else the API (an admin, or a curator for member and partner tokens of --project)")
	f.StringVar(&role, "role", "", "admin, curator, member or partner")
	f.StringVar(&subject, "subject", "", "who the token is for (sub claim)")
	f.StringVar(&project, "project", "", "project (curator, member)")
	f.StringArrayVar(&datasets, "dataset", nil, "dataset P/D a partner may upload to (repeatable)")
	f.StringArrayVar(&sites, "site", nil, "site a partner may write (repeatable); an upload with another site's events is refused whole")
	f.BoolVar(&replace, "replace", false, "let a partner bound to --site upload in mode replace-window for those sites")
	f.DurationVar(&ttl, "ttl", time.Hour, "lifetime (at most the role's max_ttl)")
	c.AddCommand(issue, newTokenListCmd(e), newTokenRevokeCmd(e), newKeyRotateCmd(e), newKeyRetireCmd(e), newKeyListCmd(e))
	return c
}

// openForTokens opens the catalog for a token command run on the server
// host; it fails with catalog.ErrLocked while a server holds it.
func (d dataDir) openForTokens() (*catalog.Store, error) {
	master, _, err := d.findMasterKey("")
	if err != nil {
		return nil, err
	}
	return d.openStore(master, slog.New(slog.DiscardHandler))
}

// lockedHint turns ErrLocked into the way round it.
func lockedHint(err error, api string) error {
	if errors.Is(err, catalog.ErrLocked) {
		return fmt.Errorf("%w: a server holds the catalog; use %s with --server and an admin --token", err, api)
	}
	return err
}

func newTokenListCmd(e *env) *cobra.Command {
	var dir, project string
	c := &cobra.Command{
		Use:   "list [--data DIR | --server URL --token T]",
		Short: "List recorded tokens (jti, subject, role, scope, expiry, revocation)",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			var recs []catalog.TokenRecord
			if dir != "" {
				st, err := dataDir(dir).openForTokens()
				if err != nil {
					return lockedHint(err, "flowcat token list")
				}
				defer st.Close()
				if recs, err = st.Tokens(cmd.Context()); err != nil {
					return err
				}
			} else {
				cl, err := e.client()
				if err != nil {
					return err
				}
				var out api.Tokens
				path := "/admin/tokens"
				if project != "" {
					path = "/projects/" + url.PathEscape(project) + "/tokens"
				}
				if err := cl.getJSON(cmd.Context(), path, &out); err != nil {
					return err
				}
				recs = out.Tokens
			}
			if e.json {
				if recs == nil {
					recs = []catalog.TokenRecord{}
				}
				return writeJSON(e.stdout, recs)
			}
			printTokens(e.stdout, recs)
			return nil
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory (server stopped); else the API")
	c.Flags().StringVar(&project, "project", "", "over the API: the member and partner tokens of project P (its curator)")
	return c
}

func printTokens(w io.Writer, recs []catalog.TokenRecord) {
	fmt.Fprintln(w, "JTI\tSUBJECT\tROLE\tSCOPE\tKID\tEXPIRES\tREVOKED")
	for _, r := range recs {
		scope := r.Project
		if len(r.Datasets) > 0 {
			scope = strings.Join(r.Datasets, ",")
		}
		if len(r.Sites) > 0 {
			scope += " sites:" + strings.Join(r.Sites, ",")
		}
		exp, kid, rev := "-", r.KeyID, "-"
		if !r.ExpiresAt.IsZero() {
			exp = stamp(r.ExpiresAt)
		}
		if kid == "" {
			kid = "-"
		}
		if r.Revoked != nil {
			rev = stamp(r.Revoked.At) + " " + r.Revoked.Reason
		}
		fmt.Fprintf(w, "%s\t%s\t%s\t%s\t%s\t%s\t%s\n", r.JTI, orDash(r.Subject), orDash(r.Role), orDash(scope), kid, exp, rev)
	}
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func newTokenRevokeCmd(e *env) *cobra.Command {
	var dir, reason, project string
	c := &cobra.Command{
		Use:   "revoke JTI --reason TEXT [--data DIR | --server URL --token T]",
		Short: "Revoke a token by its jti: it stops authenticating on the next request",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if reason == "" {
				return usageErr("token revoke: --reason is required")
			}
			var rv catalog.Revocation
			if dir != "" {
				st, err := dataDir(dir).openForTokens()
				if err != nil {
					return lockedHint(err, "flowcat token revoke")
				}
				defer st.Close()
				if rv, err = st.RevokeToken(cmd.Context(), operator, args[0], reason); err != nil {
					return usageErr("%v", err)
				}
			} else {
				cl, err := e.client()
				if err != nil {
					return err
				}
				path := "/admin/tokens/" + url.PathEscape(args[0]) + "/revoke"
				if project != "" {
					path = "/projects/" + url.PathEscape(project) + "/tokens/" + url.PathEscape(args[0]) + "/revoke"
				}
				if err := cl.postJSON(cmd.Context(), path, api.Reason{Reason: reason}, &rv); err != nil {
					return err
				}
			}
			if e.json {
				return writeJSON(e.stdout, rv)
			}
			fmt.Fprintf(e.stdout, "revoked %s at %s\n", rv.JTI, stamp(rv.At))
			return nil
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory (server stopped); else the API")
	c.Flags().StringVar(&reason, "reason", "", "why (kept in the revocation record)")
	c.Flags().StringVar(&project, "project", "", "over the API: a member or partner token of project P (its curator)")
	return c
}

// issueOverAPI issues a token through the server: a curator's member and
// partner tokens of --project through the project's route, any other
// through the admins'.
func (e *env) issueOverAPI(cmd *cobra.Command, role, subject, project string, datasets, sites []string, replace bool, ttl time.Duration) error {
	cl, err := e.client()
	if err != nil {
		return err
	}
	var out api.Token
	if project != "" && (role == server.RoleMember || role == server.RolePartner) {
		req := api.IssueProjectToken{Role: role, Subject: subject, TTL: ttl.String()}
		if role == server.RolePartner {
			req.Datasets, req.Sites, req.Replace = datasets, sites, replace
		}
		err = cl.postJSON(cmd.Context(), "/projects/"+url.PathEscape(project)+"/tokens", req, &out)
	} else {
		g := grantFor(role, subject, project, datasets, ttl)
		err = cl.postJSON(cmd.Context(), "/admin/tokens", api.IssueToken{Role: g.Role, Subject: g.Subject, Project: g.Project, Datasets: g.Datasets, Sites: sites, Replace: replace, TTL: ttl.String()}, &out)
	}
	if err != nil {
		return err
	}
	fmt.Fprintln(e.stdout, out.Token)
	return nil
}

// auditKeys audits a key change when the catalog can be opened, and says
// so when it cannot.
func (e *env) auditKeys(d dataDir, cmd *cobra.Command, action, kid string) {
	st, err := d.openForTokens()
	if err != nil {
		fmt.Fprintf(e.stderr, "note: %s %s not written to the audit trail: %v\n", action, kid, err)
		return
	}
	defer st.Close()
	if err := st.AuditKeyChange(cmd.Context(), operator, action, kid); err != nil {
		fmt.Fprintf(e.stderr, "note: %s %s not written to the audit trail: %v\n", action, kid, err)
	}
}

// changeKeys changes the signing key set of the server's data directory d
// (its instance file checked first) and saves it, then writes action on
// the key change returns to the audit trail and reports it: said, with the
// key id, or JSON.
func (e *env) changeKeys(cmd *cobra.Command, d dataDir, action, said string, change func(*server.KeySet) (string, error)) error {
	if _, err := d.readInstance(); err != nil {
		return err
	}
	ks, err := server.LoadKeySet(d.keys())
	if err != nil {
		return err
	}
	kid, err := change(ks)
	if err != nil {
		return err
	}
	if err := ks.Save(d.keys()); err != nil {
		return err
	}
	e.auditKeys(d, cmd, "key."+action, kid)
	if e.json {
		return writeJSON(e.stdout, map[string]string{"kid": kid, "action": action})
	}
	fmt.Fprintf(e.stdout, said+"\n", kid)
	return nil
}

func newKeyRotateCmd(e *env) *cobra.Command {
	var dir string
	c := &cobra.Command{
		Use:   "rotate --data DIR",
		Short: "Add a new Ed25519 signing key; older keys still verify until retired",
		Args:  cobra.NoArgs,
		RunE: onData("token rotate", &dir, func(cmd *cobra.Command, args []string, d dataDir) error {
			return e.changeKeys(cmd, d, "rotate", "new signing key %s", func(ks *server.KeySet) (string, error) {
				return ks.Rotate(time.Now())
			})
		}),
	}
	c.Flags().StringVar(&dir, "data", "", "data directory of the server")
	return c
}

func newKeyRetireCmd(e *env) *cobra.Command {
	var dir, kidFlag string
	c := &cobra.Command{
		Use:   "retire KID --data DIR",
		Short: "Stop a signing key (or " + server.LegacyKeyID + ") from verifying tokens",
		Long: `Retire stops a signing key from verifying tokens. A key id is base64url and may begin with
'-', which would read as a flag: give it as --kid KID, or after -- (token retire --data DIR -- KID).`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if dir == "" {
				return usageErr("token retire: --data DIR is required")
			}
			kid := kidFlag
			switch {
			case len(args) == 1 && kid != "" && args[0] != kid:
				return usageErr("token retire: two key ids, %q and --kid %q; give one", args[0], kid)
			case len(args) == 1:
				kid = args[0]
			case kid == "":
				return usageErr("token retire: which key? give its id (flowcat token keys lists them) as an argument or as --kid KID")
			}
			return e.changeKeys(cmd, dataDir(dir), "retire", "retired %s: its tokens no longer verify", func(ks *server.KeySet) (string, error) {
				if err := ks.Retire(kid, time.Now()); err != nil {
					return "", usageErr("%v", err)
				}
				return kid, nil
			})
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory of the server")
	c.Flags().StringVar(&kidFlag, "kid", "", "the key to retire (for an id that begins with '-')")
	return c
}

func newKeyListCmd(e *env) *cobra.Command {
	var dir string
	c := &cobra.Command{
		Use:   "keys --data DIR",
		Short: "List the signing keys: kid, created, retired, which one signs",
		Args:  cobra.NoArgs,
		RunE: onData("token keys", &dir, func(cmd *cobra.Command, args []string, d dataDir) error {
			a, err := d.authority()
			if err != nil {
				return err
			}
			ks, err := a.Keys()
			if err != nil {
				return err
			}
			type keyRow struct {
				KID       string     `json:"kid"`
				Alg       string     `json:"alg"`
				CreatedAt *time.Time `json:"created_at,omitempty"`
				RetiredAt *time.Time `json:"retired_at,omitempty"`
				State     string     `json:"state"` // signs, verifies or retired
			}
			rows := []keyRow{}
			active, _ := ks.Active()
			for _, k := range ks.Keys {
				state := "verifies"
				switch {
				case k.RetiredAt != nil:
					state = "retired"
				case k.KID == active.KID:
					state = "signs"
				}
				created := k.CreatedAt
				rows = append(rows, keyRow{KID: k.KID, Alg: "EdDSA", CreatedAt: &created, RetiredAt: k.RetiredAt, State: state})
			}
			if a.HasLegacy() {
				state := "verifies"
				if len(ks.Keys) == 0 {
					state = "signs"
				}
				rows = append(rows, keyRow{KID: server.LegacyKeyID, Alg: "HS256", State: state})
			}
			if e.json {
				return writeJSON(e.stdout, rows)
			}
			t := &table{head: []string{"KID", "ALG", "CREATED (UTC)", "STATE"}}
			for _, r := range rows {
				created, state := "-", r.State
				if r.CreatedAt != nil {
					created = minute(*r.CreatedAt)
				}
				if r.RetiredAt != nil {
					state += " " + minute(*r.RetiredAt)
				}
				t.add("", r.KID, r.Alg, created, state)
			}
			if err := t.write(e.stdout); err != nil {
				return err
			}
			return nil
		}),
	}
	c.Flags().StringVar(&dir, "data", "", "data directory of the server")
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
