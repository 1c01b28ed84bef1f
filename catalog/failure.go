package catalog

import (
	"context"
	"errors"
	"io"
	"os"
	"syscall"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Rules of the upload error recorded for an upload that failed for a
// reason other than its file.
const (
	RuleDiskFull    = "disk_full"
	RuleClientGone  = "client_gone"
	RuleTooLarge    = "too_large"
	RuleBodyTimeout = "body_timeout"
	RuleInternal    = "internal"
)

// uploadFailure is the error of an upload that failed for a reason other
// than its file: what the caller branches on (with errors.Is), the rule of
// the upload's record, and what the record says (the error's text, then
// the rest).
type uploadFailure struct {
	text, rest string
	rule       string
}

func (f *uploadFailure) Error() string { return f.text }

// Errors of an upload that failed for a reason other than its file. Each
// comes with the upload's record (IngestResult.Upload), status failed.
var (
	// ErrNoSpace: the disk (temp folder, blob store or catalog) is full.
	ErrNoSpace error = &uploadFailure{rule: RuleDiskFull, text: "no space left on the server's disk", rest: "; nothing of the upload was kept"}
	// ErrClientGone: the client went away before the upload was done.
	ErrClientGone error = &uploadFailure{rule: RuleClientGone, text: "the client went away", rest: " before the upload was done; nothing of it was kept"}
	// ErrUploadTooLarge is for the caller to wrap around the error its
	// body reader gives past the caller's size limit.
	ErrUploadTooLarge error = &uploadFailure{rule: RuleTooLarge, text: "the upload is larger than the server's limit"}
	// ErrBodyTimeout: no byte of the body came for too long (the caller's
	// reader fails with os.ErrDeadlineExceeded).
	ErrBodyTimeout error = &uploadFailure{rule: RuleBodyTimeout, text: "the upload's body stalled", rest: "; nothing of the upload was kept"}
)

// failure classifies an error that ended an ingest: the rule and message
// for the upload record and the sentinel the caller branches on (nil for a
// fault of the file itself or an internal one).
func failure(ctx context.Context, err error) (rule, msg string, sentinel error) {
	fe, isFile := schema.AsFileError(err)
	var f *uploadFailure
	switch {
	case errors.Is(err, ErrUploadTooLarge):
		f = ErrUploadTooLarge.(*uploadFailure)
	case errors.Is(err, syscall.ENOSPC) || errors.Is(err, syscall.EDQUOT):
		f = ErrNoSpace.(*uploadFailure)
	case errors.Is(err, os.ErrDeadlineExceeded):
		f = ErrBodyTimeout.(*uploadFailure)
	case ctx.Err() != nil || errors.Is(err, context.Canceled),
		isFile && fe.Rule == schema.RuleRead && errors.Is(err, io.ErrUnexpectedEOF):
		f = ErrClientGone.(*uploadFailure)
	case isFile:
		return fe.Rule, fe.Msg, nil
	default:
		return RuleInternal, "the server failed; its log has the details; nothing of the upload was kept", nil
	}
	return f.rule, f.text + f.rest, f
}
