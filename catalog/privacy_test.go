package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

// rawIDs are distinctive raw identifiers that must not be found anywhere
// in the catalog's files, records, errors or logs.
var rawIDs = []string{"RAW-CASE-55501", "RAW-SUBJ-66602", "RAW-RES-77703", "RAW-CASE-88804"}

func TestNoRawIdentifiersStored(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 64 }) // spill runs too
	e.dataset(t, "p", "d", nil)
	e.dataset(t, "p", "strict", func(s *DatasetSpec) { r := 0.0; s.RejectAbove = &r })
	ctx := context.Background()

	rows := genRows(genOpt{Seed: 12, N: 600, Shuffle: true})
	for i := range rows {
		switch i % 3 {
		case 0:
			rows[i][1] = rawIDs[0]
		case 1:
			rows[i][1] = rawIDs[3]
		}
		rows[i][2], rows[i][3] = rawIDs[1], rawIDs[2]
	}
	// Rejected rows that carry the raw ids in identifier columns: an
	// unknown code, a bad timestamp, a wrong field count and bad quoting.
	bad := append([]row(nil), rows...)
	for i := range bad {
		bad[i][11] += "-again" // other events than rows', so they are stored
	}
	bad[3][4] = "teleport"
	// A column slip: the row's own case id where its time should be. A
	// rejected row's offending text is kept (README, Privacy), but never
	// when it holds one of the row's identifier values.
	bad[4][7] = "not a time " + bad[4][1]
	data := csvBytes(header, rows)
	badData := csvBytes(header, bad)
	badData = append(badData, []byte(fmt.Sprintf("north,%s,%s\n", rawIDs[0], rawIDs[1]))...)
	badData = append(badData, []byte(fmt.Sprintf("north,\"%s\"x,%s,%s,arrival,,,2026-03-02T08:00:00Z,,,,\n", rawIDs[3], rawIDs[1], rawIDs[2]))...)

	var errs []error
	ingest := func(ds string, b []byte) *IngestResult {
		res, err := e.s.Ingest(ctx, "p", ds, bytes.NewReader(b), IngestOptions{Filename: "night.csv", By: "site"})
		if err != nil {
			errs = append(errs, err)
		}
		return res
	}
	if res := ingest("d", data); res == nil || res.Upload.Status != UploadAccepted {
		t.Fatalf("accepted upload: %v", errs)
	}
	if res := ingest("d", badData); res == nil || res.Upload.Status != UploadAccepted || res.Upload.Report.Rows.Rejected != 4 {
		t.Fatalf("upload with rejected rows: %+v %v", res, errs)
	}
	if res := ingest("strict", badData); res == nil || res.Upload.Status != UploadRejected {
		t.Fatalf("rejected upload: %v", errs)
	}
	// File errors: files without their header row, whose first data row
	// (repeating a cell, or not) holds raw ids, and a truncated gzip stream.
	// (A real header naming a column twice may quote the column name: a
	// name is not an identifier value.)
	dupHeader := []byte("north," + rawIDs[0] + "," + rawIDs[0] + ",arrival,2026-03-02T08:00:00Z\n")
	noHeader := []byte("north," + rawIDs[0] + ",arrival,2026-03-02T08:00:00Z\n")
	for _, b := range [][]byte{dupHeader, noHeader, gzipBytes(badData)[:200]} {
		res := ingest("d", b)
		if res == nil || res.Upload.Status != UploadFailed {
			t.Fatalf("failed upload: %+v %v", res, errs)
		}
	}
	if !errors.Is(errs[len(errs)-1], ErrFileInvalid) {
		t.Fatalf("errors: %v", errs)
	}

	// Offline checks too.
	if cr, err := Check(ctx, bytes.NewReader(badData), CheckOptions{TempDir: e.tmp, RunEvents: 64}); err != nil {
		t.Fatal(err)
	} else {
		b, _ := json.Marshal(cr)
		mustContainNone(t, "the Check result", string(b), rawIDs)
	}

	for _, hit := range grepDir(t, e.dir, rawIDs) {
		t.Error(hit)
	}
	for _, err := range errs {
		mustContainNone(t, "error "+err.Error(), err.Error(), rawIDs)
	}
	mustContainNone(t, "the log", e.logs.String(), rawIDs)
	for _, ds := range []string{"d", "strict"} {
		ups, err := e.s.Uploads(ctx, "p", ds)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := json.Marshal(ups)
		mustContainNone(t, "upload records of "+ds, string(b), rawIDs)
		vs, _ := e.s.Versions(ctx, "p", ds)
		b, _ = json.Marshal(vs)
		mustContainNone(t, "versions of "+ds, string(b), rawIDs)
		// The snapshots are compressed, so read them back as well.
		for _, v := range vs {
			for _, f := range v.Manifest.Files {
				for _, ev := range readEvents(t, e.blobBytes(t, f.SHA256)) {
					for _, fld := range schema.Fields {
						mustContainNone(t, "a snapshot", ev.Value(fld), rawIDs)
					}
				}
			}
		}
	}
}
