package catalog

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// CheckOptions configure Check.
type CheckOptions struct {
	Name      string    // file name for messages
	TempDir   string    // where the throwaway catalog lives; default os.TempDir()
	RunEvents int       // see Options.RunEvents
	Now       time.Time // the "upload" instant; default time.Now()
	Limits    schema.Limits
	// Dataset is the dataset the file would be sent to, as it would be
	// created: its profile (YAML; empty means the schema's own column
	// names), zone, threshold of invalid rows, window, change policy
	// and history setting. Its Project and Name are not used.
	Dataset DatasetSpec
}

// CheckResult is the offline verdict on one file and its report.
type CheckResult struct {
	// Accepted says the ingest accepted the file; Reason, when it did
	// not, says why, as the upload's record would.
	Accepted bool            `json:"accepted"`
	Reason   string          `json:"reason,omitempty"`
	Report   *quality.Report `json:"report"`
	Unmapped []string        `json:"unmapped_columns,omitempty"`
	// Events counts the copies within the file (stored once at ingest),
	// and conflicting stable event ids.
	Events *EventCounts `json:"events"`
}

// Check runs src through Ingest itself, into a throwaway catalog in a
// folder of opt.TempDir that it removes before it returns, so that a
// partner can test a file before sending it and get the verdict the
// server would give: one pipeline, one rule of acceptance. The catalog's
// master key is made for the check and forgotten, so the report's
// samples hold throwaway pseudonyms, and nothing raw is written (as at
// any ingest). A dataset spec that does not validate fails with
// ErrInvalid; a file that cannot be read fails with an error wrapping
// ErrFileInvalid and a *schema.FileError.
func Check(ctx context.Context, src io.Reader, opt CheckOptions) (*CheckResult, error) {
	if opt.TempDir == "" {
		opt.TempDir = os.TempDir()
	}
	if opt.Now.IsZero() {
		opt.Now = time.Now()
	}
	dir, err := os.MkdirTemp(opt.TempDir, "check-*")
	if err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	defer os.RemoveAll(dir)
	s, err := openThrowaway(dir, opt)
	if err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	defer s.Close()
	const project, dataset = "check", "file"
	if _, err := s.CreateProject(ctx, project, "", "check"); err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	spec := opt.Dataset
	spec.Project, spec.Name = project, dataset
	if _, err := s.CreateDataset(ctx, spec, "check"); err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	res, err := s.Ingest(ctx, project, dataset, src, IngestOptions{Filename: opt.Name, By: "check"})
	switch {
	case errors.Is(err, ErrFileInvalid):
		return nil, err
	case err != nil && !errors.Is(err, ErrRejected):
		return nil, fmt.Errorf("check: %w", err)
	}
	up := res.Upload
	out := &CheckResult{Accepted: err == nil, Report: up.Report, Unmapped: up.Unmapped, Events: up.Events}
	if err != nil {
		out.Reason = strings.TrimSuffix(err.Error(), ": "+ErrRejected.Error())
	}
	return out, nil
}

// openThrowaway opens an empty catalog in dir under a master key made
// for it.
func openThrowaway(dir string, opt CheckOptions) (*Store, error) {
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		return nil, err
	}
	bs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		return nil, err
	}
	tmp := filepath.Join(dir, "tmp")
	if err := os.Mkdir(tmp, 0o700); err != nil {
		return nil, err
	}
	return Open(filepath.Join(dir, "check.db"), bs, Options{Master: mk, TempDir: tmp, RunEvents: opt.RunEvents, Limits: opt.Limits,
		Now: func() time.Time { return opt.Now }, Logger: slog.New(slog.DiscardHandler)})
}
