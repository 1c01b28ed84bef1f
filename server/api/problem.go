package api

import (
	"net/http"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// ProblemMedia is the media type of every error answer (RFC 9457 section
// 3).
const ProblemMedia = "application/problem+json"

// ProblemType is the type of every problem: "about:blank" (RFC 9457
// section 4.2.1), since the status and the code extension say all there
// is to say; the title is then the status's phrase.
const ProblemType = "about:blank"

// Problem is the body of every error answer: an RFC 9457 problem details
// object (type, title, status, detail) with extension members (section
// 3.2): code, a word a program can branch on ("not_found", "rejected",
// ...), and for a refused upload the rule, line and column of the first
// problem and the upload's record. Error repeats the members in the form
// the answers had before problem details, for clients written against it.
type Problem struct {
	Type   string          `json:"type"`
	Title  string          `json:"title"`
	Status int             `json:"status"`
	Detail string          `json:"detail"`
	Code   string          `json:"code"`
	Rule   string          `json:"rule,omitempty"`
	Line   int64           `json:"line,omitempty"`
	Column string          `json:"column,omitempty"`
	Upload *catalog.Upload `json:"upload,omitempty"`
	Error  ErrorBody       `json:"error"`
}

// ErrorBody is an error as the answers' "error" member gives it: the
// status again, the code, the message (the problem's detail) and, for an
// upload, where it failed.
type ErrorBody struct {
	Status  int             `json:"status"`
	Code    string          `json:"code"`
	Message string          `json:"message"`
	Rule    string          `json:"rule,omitempty"`
	Line    int64           `json:"line,omitempty"`
	Column  string          `json:"column,omitempty"`
	Upload  *catalog.Upload `json:"upload,omitempty"`
}

// NewProblem is the problem details of b.
func NewProblem(b ErrorBody) Problem {
	title := http.StatusText(b.Status)
	if title == "" {
		title = statusTitles[b.Status]
	}
	if title == "" {
		title = "Error"
	}
	return Problem{Type: ProblemType, Title: title, Status: b.Status, Detail: b.Message, Code: b.Code,
		Rule: b.Rule, Line: b.Line, Column: b.Column, Upload: b.Upload, Error: b}
}

// statusTitles name the statuses net/http does not: 499, a request whose
// client went away (common practice, not a standard code).
var statusTitles = map[int]string{499: "Client Closed Request"}
