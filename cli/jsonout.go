package cli

import (
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/goccy/go-yaml"
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// The --json answers of commands whose plain output is not a JSON
// document of the server: their shapes are documented in DEVELOPERS.md
// ("JSON output of the command line").

// issuedToken is token issue --json.
type issuedToken struct {
	Token     string    `json:"token"`
	ID        string    `json:"jti"`
	KeyID     string    `json:"kid,omitempty"`
	Subject   string    `json:"subject"`
	Role      string    `json:"role"`
	Project   string    `json:"project,omitempty"`
	Datasets  []string  `json:"datasets,omitempty"`
	IssuedAt  time.Time `json:"issued_at"`
	ExpiresAt time.Time `json:"expires_at"`
	Recorded  bool      `json:"recorded"` // in the token list and audit trail
}

// printIssued prints a token: alone on its line, or with --json its
// claims, read back from the token itself.
func (e *env) printIssued(tok string, recorded bool) error {
	if !e.json {
		_, err := fmt.Fprintln(e.stdout, tok)
		return err
	}
	out := issuedToken{Token: tok, Recorded: recorded}
	parts := strings.Split(tok, ".")
	if len(parts) != 3 {
		return fmt.Errorf("token issue: the token is not a JWT")
	}
	var head struct {
		Kid string `json:"kid"`
	}
	var claims struct {
		Sub      string   `json:"sub"`
		Jti      string   `json:"jti"`
		Role     string   `json:"role"`
		Project  string   `json:"project"`
		Datasets []string `json:"datasets"`
		Iat, Exp int64
	}
	for i, dst := range []any{&head, &claims} {
		b, err := base64.RawURLEncoding.DecodeString(parts[i])
		if err != nil {
			return fmt.Errorf("token issue: reading the token back: %w", err)
		}
		if err := json.Unmarshal(b, dst); err != nil {
			return fmt.Errorf("token issue: reading the token back: %w", err)
		}
	}
	out.KeyID, out.ID, out.Subject, out.Role, out.Project, out.Datasets = head.Kid, claims.Jti, claims.Sub, claims.Role, claims.Project, claims.Datasets
	out.IssuedAt, out.ExpiresAt = time.Unix(claims.Iat, 0).UTC(), time.Unix(claims.Exp, 0).UTC()
	return writeJSON(e.stdout, out)
}

// savedFile is export --json and bundle --json: what was written where.
type savedFile struct {
	Dataset    string `json:"dataset"`
	Version    int    `json:"version"`
	SnapshotID string `json:"snapshot_id"`
	Format     string `json:"format"`
	File       string `json:"file"`
	Bytes      int64  `json:"bytes"`
	SHA256     string `json:"sha256"`
}

// saveVersion downloads sub (a path under the version) of r's version,
// pinned to its number first so that the file and the answer name the
// same version, to out; with --json it prints a savedFile.
func (e *env) saveVersion(cmd *cobra.Command, r ref, sub string, q map[string][]string, format, out string) error {
	if e.json && out == "-" {
		return usageErr("--json describes the file written: give -o FILE, not -")
	}
	cl, err := e.client()
	if err != nil {
		return err
	}
	var v catalog.Version
	if err := cl.getJSON(cmd.Context(), r.versionPath(), &v); err != nil {
		return err
	}
	at := r.at(v.Number)
	n, sum, err := e.downloadSum(cmd, cl, at.versionPath()+sub, q, out)
	if err != nil {
		return err
	}
	if e.json {
		return writeJSON(e.stdout, savedFile{Dataset: r.Project + "/" + r.Dataset, Version: v.Number, SnapshotID: v.SnapshotID.String(),
			Format: format, File: out, Bytes: n, SHA256: sum})
	}
	if out != "-" && !e.quiet {
		fmt.Fprintf(e.stderr, "wrote %s (%s, %s@%d)\n", out, humanBytes(n), r.Project+"/"+r.Dataset, v.Number)
	}
	return nil
}

// downloadSum is download that also returns the sha256 of what it wrote.
func (e *env) downloadSum(cmd *cobra.Command, cl *client, path string, q map[string][]string, out string) (int64, string, error) {
	h := sha256.New()
	real := e.stdout
	e2 := *e
	e2.stdout = io.MultiWriter(real, h)
	if out != "-" {
		e2.stdout = real
	}
	n, err := e2.download(cmd, cl, path, q, out)
	if err != nil {
		return n, "", err
	}
	if out != "-" {
		s, err := fileSHA256(out)
		return n, s, err
	}
	return n, hex.EncodeToString(h.Sum(nil)), nil
}

// citation is cite --json: the CITATION.cff as a JSON object (the same
// document, Citation File Format 1.2.0, which has a JSON schema of its
// own) with the version it cites.
type citation struct {
	Dataset    string          `json:"dataset"`
	Version    int             `json:"version"`
	SnapshotID string          `json:"snapshot_id"`
	Citation   json.RawMessage `json:"citation"`
}

func citationJSON(v *catalog.Version, cff []byte) (*citation, error) {
	j, err := yaml.YAMLToJSON(cff)
	if err != nil {
		return nil, fmt.Errorf("cite: the server's CITATION.cff does not parse as YAML: %w", err)
	}
	return &citation{Dataset: v.Dataset.String(), Version: v.Number, SnapshotID: v.SnapshotID.String(), Citation: j}, nil
}
