package catalog

import (
	"context"
	"fmt"
	"io"
	"os"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// CheckOptions configure Check.
type CheckOptions struct {
	Name       string    // file name for messages
	TempDir    string    // for sort runs; default os.TempDir()
	RunEvents  int       // see Options.RunEvents
	Now        time.Time // the "upload" instant; default time.Now()
	WindowFrom time.Time // declared window, zero = open
	WindowTo   time.Time
	Limits     schema.Limits // see Options.Limits
}

// CheckResult is the offline report of one file.
type CheckResult struct {
	Report   *quality.Report `json:"report"`
	Unmapped []string        `json:"unmapped_columns,omitempty"`
	// Events counts the copies within the file (stored once at ingest),
	// and conflicting stable event ids.
	Events *EventCounts `json:"events"`
}

// Check runs the ingest's read, validate and quality pipeline over src
// (copies within the file are counted once, as at ingest) without storing
// anything, so a partner can test a file before sending
// it. Identifiers are pseudonymized under a throwaway key, so the report's
// samples hold no raw values. A nil prof means schema.DefaultProfile(). A
// file that cannot be read fails with an error wrapping ErrFileInvalid and
// a *schema.FileError.
func Check(ctx context.Context, src io.Reader, prof *schema.Profile, opt CheckOptions) (*CheckResult, error) {
	if opt.TempDir == "" {
		opt.TempDir = os.TempDir()
	}
	if opt.RunEvents <= 0 {
		opt.RunEvents = 1 << 16
	}
	if opt.Now.IsZero() {
		opt.Now = time.Now()
	}
	if prof == nil {
		prof = schema.DefaultProfile()
	}
	pz, err := throwawayPseudonymizer()
	if err != nil {
		return nil, err
	}
	acc := quality.NewAccumulator(quality.Options{UploadedAt: opt.Now, WindowFrom: opt.WindowFrom, WindowTo: opt.WindowTo, MappedFields: mappedFields(prof), Zone: prof.Location(), Terminal: prof.Terminal, ResourceCapacity: prof.ResourceCapacity, MaxCase: prof.MaxCase(), Capacity: prof.Capacity})
	srt := newSorter(opt.TempDir, opt.RunEvents)
	defer srt.Close()
	rd, err := schema.NewReader(src, prof, schema.ReaderOptions{Name: opt.Name, Limits: opt.Limits})
	if err == nil {
		ai := newAttrIngest(opt.TempDir, prof, pz)
		defer ai.close()
		err = readAll(ctx, rd, pz, acc, srt, ai)
	}
	if err != nil {
		if _, ok := schema.AsFileError(err); ok {
			return nil, fmt.Errorf("%w: %w", ErrFileInvalid, err)
		}
		return nil, fmt.Errorf("check: %w", err)
	}
	cp := NewCasePass(opt.TempDir, opt.RunEvents)
	cp.Terminal = prof.Terminal
	defer cp.Close()
	hf := newHeldFilter(IdentityOf(prof), ChangesRefuse)
	err = srt.Finish(hf.keep(ctx, func(e *schema.Event) error {
		fl := acc.Observe(e)
		line := e.Line
		e.Line = quality.PackLine(line, fl)
		err := cp.Add(e)
		e.Line = line
		return err
	}))
	if err == nil {
		_, err = cp.Run(acc)
	}
	if err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	rep := acc.Report()
	rep.UnmappedColumns = rd.Unmapped()
	return &CheckResult{Report: rep, Unmapped: rep.UnmappedColumns, Events: hf.uploadCounts()}, nil
}

func throwawayPseudonymizer() (*anonymize.Pseudonymizer, error) {
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	sk, err := anonymize.NewProjectKey(mk, "check")
	if err != nil {
		return nil, fmt.Errorf("check: %w", err)
	}
	return anonymize.OpenProjectKey(mk, "check", sk)
}
