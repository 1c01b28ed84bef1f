package cli

import (
	"net/http"
	"testing"
)

// TestProblemError checks how the client reads an error answer: problem
// details (RFC 9457) with flowcat's extensions give the status, code,
// detail and the upload's place; any other body (a proxy's page, an
// answer of another server) gives its status and text under code "http".
func TestProblemError(t *testing.T) {
	p := problemError(http.StatusUnprocessableEntity, []byte(`{"type": "about:blank", "title": "Unprocessable Entity", "status": 422,
		"detail": "visits.csv: 3 of 10 rows rejected", "code": "rejected", "rule": "unknown_event_type", "line": 4, "column": "event_type",
		"upload": {"id": "u7"}, "error": {"status": 422, "code": "rejected", "message": "visits.csv: 3 of 10 rows rejected"}}`))
	if p.Status != 422 || p.Code != "rejected" || p.Message != "visits.csv: 3 of 10 rows rejected" || p.Rule != "unknown_event_type" ||
		p.Line != 4 || p.Column != "event_type" || p.Upload == nil || p.Upload.ID != "u7" {
		t.Errorf("problem read as %+v", p.ErrorBody)
	}
	if got, want := p.Error(), "server said 422 rejected: visits.csv: 3 of 10 rows rejected"; got != want {
		t.Errorf("message %q, want %q", got, want)
	}
	p = problemError(http.StatusBadGateway, []byte("<html>bad gateway</html>\n"))
	if p.Status != 502 || p.Code != "http" || p.Message != "<html>bad gateway</html>" {
		t.Errorf("a body that is not problem details read as %+v", p.ErrorBody)
	}
}
