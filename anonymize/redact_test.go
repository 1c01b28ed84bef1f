package anonymize

import (
	"bytes"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"log/slog"
	"strings"
	"testing"
)

// TestKeysDoNotPrint: no generic printer or encoder shows key bytes.
func TestKeysDoNotPrint(t *testing.T) {
	mk, err := GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	sk, err := NewProjectKey(mk, "p")
	if err != nil {
		t.Fatal(err)
	}
	pz, err := OpenProjectKey(mk, "p", sk)
	if err != nil {
		t.Fatal(err)
	}
	// Exported fields only: fmt cannot call methods on unexported fields,
	// so a struct holding a key in one must never be printed (redact.go).
	holder := struct {
		M MasterKey
		P *Pseudonymizer
	}{mk, pz}
	var outs []string
	for _, verb := range []string{"%v", "%+v", "%#v", "%s", "%x", "%X", "%d", "%q"} {
		outs = append(outs, fmt.Sprintf(verb, mk), fmt.Sprintf(verb, pz), fmt.Sprintf(verb, holder))
	}
	j, _ := json.Marshal(holder)
	outs = append(outs, string(j))
	var logs bytes.Buffer
	slog.New(slog.NewJSONHandler(&logs, nil)).Info("boot", "key", mk, "pz", pz, "holder", holder)
	slog.New(slog.NewTextHandler(&logs, nil)).Info("boot", "key", mk, "pz", pz, "holder", holder)
	outs = append(outs, logs.String())
	secrets := []string{mk.Hex(), hex.EncodeToString(pz.gens[0].key[:]), fmt.Sprint([]byte(mk[:4])), fmt.Sprint(pz.gens[0].key[:4])}
	for _, out := range outs {
		for _, s := range secrets {
			if strings.Contains(strings.ToLower(out), strings.ToLower(s)) || strings.Contains(out, strings.Trim(s, "[]")) {
				t.Errorf("key material printed: %q", out)
			}
		}
	}
}
