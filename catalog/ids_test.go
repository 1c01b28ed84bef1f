package catalog

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
)

func TestIDsParseAndString(t *testing.T) {
	hex := strings.Repeat("0a", 32)
	id, err := ParseSnapshotID(strings.ToUpper(hex))
	if err != nil || id.String() != hex {
		t.Errorf("ParseSnapshotID: %s, %v", id, err)
	}
	for _, bad := range []string{"", hex[:63], hex + "0", strings.Repeat("zz", 32)} {
		if _, err := ParseSnapshotID(bad); !errors.Is(err, ErrInvalid) {
			t.Errorf("ParseSnapshotID(%q): %v", bad, err)
		}
	}
	for _, c := range []struct {
		in string
		ok bool
	}{{"u1", true}, {"u42", true}, {"u0", false}, {"u01", false}, {"1", false}, {"u", false}, {"u-3", false}, {"x1", false}} {
		id, err := ParseUploadID(c.in)
		if (err == nil) != c.ok || c.ok && (id.String() != c.in || UploadIDOf(id.Seq()) != id) {
			t.Errorf("ParseUploadID(%q) = %q, %v", c.in, id, err)
		}
	}
	r, err := ParseDatasetRef("lab/flow-2")
	if err != nil || r != (DatasetRef{"lab", "flow-2"}) || r.String() != "lab/flow-2" {
		t.Errorf("ParseDatasetRef: %+v, %v", r, err)
	}
	for _, bad := range []string{"lab", "lab/", "/flow", "Lab/flow", "lab/flow/x"} {
		if _, err := ParseDatasetRef(bad); !errors.Is(err, ErrInvalid) {
			t.Errorf("ParseDatasetRef(%q): %v", bad, err)
		}
	}
	// In JSON they are the strings they always were, so stored records and
	// manifests keep their bytes.
	b, _ := json.Marshal(struct {
		S SnapshotID
		D DatasetRef
		U UploadID
	}{id, r, "u3"})
	if want := `{"S":"` + hex + `","D":"lab/flow-2","U":"u3"}`; string(b) != want {
		t.Errorf("JSON %s, want %s", b, want)
	}
}
