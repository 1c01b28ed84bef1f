package catalog

import (
	"fmt"
	"slices"

	"github.com/flowcat-catalog/flowcat/schema"
)

// RuleSiteNotAllowed is the rule of an upload refused because one of its
// events names a site the uploader is not bound to (a partner token names
// its sites).
const RuleSiteNotAllowed = "site_not_allowed"

// siteBinding checks an upload's events against the sites its uploader
// may write (IngestOptions.BoundSites): one event of another site refuses
// the whole upload. Site names are not identifiers; the error names the
// first such line and site.
type siteBinding struct {
	allowed   []string // nil: any site
	outside   int
	firstLine int64
	firstSite string
}

func newSiteBinding(opt IngestOptions) *siteBinding { return &siteBinding{allowed: opt.BoundSites} }

func (b *siteBinding) observe(e *schema.Event) {
	if b.allowed == nil || slices.Contains(b.allowed, e.Site) {
		return
	}
	b.outside++
	if b.firstLine == 0 || e.Line < b.firstLine {
		b.firstLine, b.firstSite = e.Line, e.Site
	}
}

func (b *siteBinding) uploadError() *UploadError {
	msg := fmt.Sprintf("site %q is not among the sites this uploader may write (%d events in all); nothing of the upload was kept", truncate(b.firstSite, 40), b.outside)
	return &UploadError{Rule: RuleSiteNotAllowed, Line: b.firstLine, Column: string(schema.FieldSite), Message: msg}
}
