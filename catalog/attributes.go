package catalog

import (
	"context"
	"crypto/sha256"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/parquet-go/parquet-go"
	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// A version's case attributes live in their own Parquet file beside the
// case table: one row per row of the case table, in the same (case_id)
// order, holding case_id and each attribute the profile declares (already
// generalized at ingest; NULL where a case has none). The manifest lists
// its columns with their roles and rules; the disclosure report over its
// quasi-identifiers is stored beside the manifest.

// AttributeTable is a version's case attribute table.
type AttributeTable struct {
	SHA256  blob.ID           `json:"sha256"`
	Bytes   int64             `json:"bytes"`
	Rows    int64             `json:"rows"`
	Columns []AttributeColumn `json:"columns"`
}

// AttributeColumns lists the event attribute columns of a snapshot file
// (FileEntry.Attributes), after the schema's columns, in this order.
type AttributeColumns []AttributeColumn

// Columns returns the list, nil for a nil receiver (a file without).
func (c *AttributeColumns) Columns() []AttributeColumn {
	if c == nil {
		return nil
	}
	return *c
}

// AttributeColumn describes one column of the case attribute table or
// one event attribute column of a snapshot file.
type AttributeColumn struct {
	Name string          `json:"name"`
	Type schema.AttrType `json:"type"`
	Role schema.AttrRole `json:"role"`
	Rule string          `json:"rule"` // the generalization applied at ingest, in words
}

// DisclosureRef names a version's stored disclosure report by the SHA-256
// of its JSON, with its headline figures.
type DisclosureRef struct {
	SHA256         blob.ID `json:"sha256"`
	Bytes          int64   `json:"bytes"`
	MaxRisk        float64 `json:"max_risk"` // the version's maximum prosecutor risk
	AboveThreshold bool    `json:"above_threshold"`
}

// DisclosurePolicy is a project's disclosure control: its k, its
// threshold on the maximum prosecutor risk above which a version cannot
// be published without a recorded override, and whether the
// quasi-identifiers of cases in classes below k are suppressed when a
// version is made.
type DisclosurePolicy struct {
	K        int     `json:"k"`
	MaxRisk  float64 `json:"max_risk"`
	Suppress bool    `json:"suppress,omitempty"`
}

// DefaultDisclosurePolicy is the policy of a project that set none: k = 5
// and a maximum risk of 1/5 (common practice for shared research data).
var DefaultDisclosurePolicy = DisclosurePolicy{K: 5, MaxRisk: 0.2}

// Validate checks the policy.
func (p DisclosurePolicy) Validate() error {
	if p.K < 2 || p.K > 1000 {
		return fmt.Errorf("disclosure policy: k %d: want 2 to 1000: %w", p.K, ErrInvalid)
	}
	if !(p.MaxRisk > 0 && p.MaxRisk <= 1) {
		return fmt.Errorf("disclosure policy: max risk %v: want above 0 and at most 1: %w", p.MaxRisk, ErrInvalid)
	}
	return nil
}

// Disclosure returns the project's policy, or the default.
func (p *Project) DisclosurePolicy() DisclosurePolicy {
	if p.Disclosure != nil {
		return *p.Disclosure
	}
	return DefaultDisclosurePolicy
}

// ErrRiskAboveThreshold is returned for publishing a version whose
// maximum disclosure risk is above its project's threshold without an
// override.
var ErrRiskAboveThreshold = errors.New("disclosure risk above the project's threshold")

// RiskOverride records a curator's decision to publish a version whose
// disclosure risk was above the project's threshold.
type RiskOverride struct {
	By        string    `json:"by"`
	At        time.Time `json:"at"`
	Reason    string    `json:"reason"`
	MaxRisk   float64   `json:"max_risk"`  // the version's
	Threshold float64   `json:"threshold"` // the project's, then
}

var bucketDisclosure = []byte("disclosure_reports") // report sha256 -> JSON

// SetDisclosurePolicy sets a project's disclosure policy; the change is
// audited. It applies to versions made and published from then on.
func (s *Store) SetDisclosurePolicy(ctx context.Context, project string, p DisclosurePolicy, by string) (*Project, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	var out Project
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketProjects)
		if err := getJSON(b, []byte(project), &out, "project "+project); err != nil {
			return err
		}
		out.Disclosure = &p
		if err := putJSON(b, []byte(project), &out); err != nil {
			return err
		}
		return audit(tx, s.opt.Now().UTC(), by, "project.disclosure", fmt.Sprintf("%s k=%d max_risk=%g suppress=%t", project, p.K, p.MaxRisk, p.Suppress))
	})
	if err != nil {
		return nil, err
	}
	return &out, nil
}

// DisclosureReport returns the stored disclosure report of a version, as
// stored (JSON), or ErrNotFound when the version has none (its profile
// declares no attributes).
func (s *Store) DisclosureReport(ctx context.Context, project, dataset string, n int) ([]byte, *Version, error) {
	v, err := s.Version(ctx, project, dataset, n)
	if err != nil {
		return nil, nil, err
	}
	ref := v.Manifest.Disclosure
	if ref == nil {
		return nil, v, fmt.Errorf("version %d has no disclosure report (its profile declares no attributes): %w", v.Number, ErrNotFound)
	}
	var out []byte
	err = s.db.View(func(tx *bolt.Tx) error {
		if b := tx.Bucket(bucketDisclosure); b != nil {
			out = append([]byte(nil), b.Get(ref.SHA256[:])...)
		}
		if out == nil {
			return fmt.Errorf("disclosure report %s is missing", ref.SHA256)
		}
		return nil
	})
	return out, v, err
}

// PublishOverride publishes a version whose disclosure risk is above its
// project's threshold, recording who decided it, when and why (a reason
// is required), on the version and in the audit trail.
func (s *Store) PublishOverride(ctx context.Context, project, dataset string, n int, by, reason string) (*Version, error) {
	reason = strings.TrimSpace(reason)
	if reason == "" || len(reason) > 500 {
		return nil, fmt.Errorf("publish: an override needs a reason of 1 to 500 bytes: %w", ErrInvalid)
	}
	proj, err := s.Project(ctx, project)
	if err != nil {
		return nil, err
	}
	thr := proj.DisclosurePolicy().MaxRisk
	return s.publish(ctx, project, dataset, n, by, &RiskOverride{By: by, Reason: reason, Threshold: thr})
}

// publishGate refuses to publish v above the threshold unless ov is
// given; with ov it fills in the override to record.
func publishGate(v *Version, thr float64, ov *RiskOverride, now time.Time) error {
	d := v.Manifest.Disclosure
	if d == nil || d.MaxRisk <= thr {
		return nil
	}
	if ov == nil {
		return fmt.Errorf("version %d has a maximum prosecutor risk of %.3f, above the project's threshold of %.3f; publish it with an override and a reason, or change the policy: %w", v.Number, d.MaxRisk, thr, ErrRiskAboveThreshold)
	}
	ov.At, ov.MaxRisk, ov.Threshold = now, d.MaxRisk, thr
	v.RiskOverride = ov
	return nil
}

// attrIngest is an upload's part in its version's attributes: the
// profile's attributes, the time shift, and the generalized values of the
// upload's cases, sorted by case on disk.
type attrIngest struct {
	attrs  []schema.Attribute // case attributes
	events []schema.Attribute // event attributes: the snapshot's extra columns
	all    []schema.Attribute // the profile's, both levels, in profile order
	shift  int
	pz     *anonymize.Pseudonymizer
	rows   *disclosure.Counter // case \0 "2" \0 values
	vals   []string            // every attribute of the row, profile order
	cvals  []string            // its case attributes
	evals  []string            // its event attributes
	key    []byte
}

// attrMemory bounds the bytes of attribute records each on-disk sort of
// them holds.
const attrMemory = 16 << 20

// newAttrIngest returns nil when the profile declares no attribute and no
// time shift.
func newAttrIngest(dir string, p *schema.Profile, pz *anonymize.Pseudonymizer) *attrIngest {
	if len(p.Attributes) == 0 && p.TimeShiftDays == 0 {
		return nil
	}
	return &attrIngest{attrs: p.CaseAttributes(), events: p.EventAttributes(), all: p.Attributes, shift: p.TimeShiftDays, pz: pz, rows: disclosure.NewCounter(dir, attrMemory)}
}

// eventColumns is what the manifest says of an upload's event attribute
// columns (nil: none).
func (ai *attrIngest) eventColumns() *AttributeColumns {
	if ai == nil || len(ai.events) == 0 {
		return nil
	}
	cols := AttributeColumns(attributeColumns(ai.events))
	return &cols
}

// shiftDays is the profile's time shift bound, 0 for none (and for nil).
func (ai *attrIngest) shiftDays() int {
	if ai == nil {
		return 0
	}
	return ai.shift
}

// take applies the time shift d of e's subject (anonymize's ApplyShift,
// always derived from the key's first generation) to e (pseudonymized)
// and keeps its case's attribute values; a value of the wrong type
// rejects the row.
func (ai *attrIngest) take(rd *schema.Reader, e *schema.Event, d time.Duration) (*schema.Rejection, error) {
	if ai == nil {
		return nil, nil
	}
	if ai.shift > 0 {
		e.OccurredAt = e.OccurredAt.Add(d)
	}
	if len(ai.all) == 0 {
		return nil, nil
	}
	var rej *schema.Rejection
	ai.vals, rej = rd.Attributes(ai.vals, d)
	if rej != nil {
		return rej, nil
	}
	ai.cvals, ai.evals = ai.cvals[:0], ai.evals[:0]
	empty := true
	for i, v := range ai.vals {
		if ai.all[i].EventLevel() {
			ai.evals = append(ai.evals, v)
			continue
		}
		ai.cvals = append(ai.cvals, v)
		if v != "" {
			empty = false
		}
	}
	if len(ai.events) > 0 {
		e.Attrs = schema.JoinAttrs(ai.evals)
	}
	if empty || len(ai.attrs) == 0 {
		return nil, nil
	}
	ai.key = attrKey(ai.key[:0], e.CaseID, '2', ai.cvals)
	return nil, ai.rows.Add(string(ai.key), 1)
}

func (ai *attrIngest) close() {
	if ai != nil {
		ai.rows.Close()
	}
}

// attrKey is one record of the join of a version's attributes: the case,
// a tag (0: the case is in the case table, 1: the parent's values, 2: the
// upload's) and the values; NUL, which no value holds, separates them, so
// records sort by case, then tag, then values.
func attrKey(b []byte, caseID string, tag byte, vals []string) []byte {
	b = append(b, caseID...)
	b = append(b, 0, tag)
	for _, v := range vals {
		b = append(b, 0)
		b = append(b, v...)
	}
	return b
}

// versionAttrs is what a version's case attributes came to.
type versionAttrs struct {
	table   *AttributeTable
	ref     *DisclosureRef
	report  []byte
	sup     int64
	release func()
}

func (va *versionAttrs) done() {
	if va != nil && va.release != nil {
		va.release()
	}
}

// caseAttributes builds the new version's case attribute table from its
// case table, the parent's attribute table (kept for cases the upload
// gives no values, except in replace-all) and the upload's values, writes
// it to the blob store, and computes the disclosure report; with the
// project's Suppress set, cases in classes below k lose their
// quasi-identifiers first. It returns nil when the profile declares no
// attributes or the version has no case table. With event-level sensitive
// attributes, the version's files are read for their values
// (eventSensitive).
func (s *Store) caseAttributes(ctx context.Context, ds *Dataset, parent *Version, files []FileEntry, caseTable *CaseTableEntry, ai *attrIngest, mode Mode, keyID string) (*versionAttrs, error) {
	if ai == nil || len(ai.attrs) == 0 || caseTable == nil {
		return nil, nil
	}
	proj, err := s.Project(ctx, ds.Project)
	if err != nil {
		return nil, err
	}
	attrs := ai.attrs
	cols := attributeColumns(attrs)
	var en []string // event-level sensitive attributes
	for _, a := range ai.events {
		if a.Role == schema.RoleSensitive {
			en = append(en, a.Name)
		}
	}
	join, err := s.joinAttributes(ctx, parent, files, caseTable, ai, mode, cols, en)
	if err != nil {
		return nil, err
	}
	defer join.Close()
	an := newAttrAnalysis(attrs, en, proj.DisclosurePolicy(), join, len(cols), s.opt.TempDir)
	var small map[string]bool
	if an.pol.Suppress && len(an.quasi) > 0 {
		// A first pass finds the classes below k; the second writes.
		_, _, err := an.run(nil, nil)
		var sn *suppressNeeded
		if errors.As(err, &sn) {
			small = sn.small
		} else if err != nil {
			return nil, err
		}
	}
	tw, err := newAttrTableWriter(s.opt.TempDir, s.opt.RowGroupRows, keyID, attrs)
	if err != nil {
		return nil, err
	}
	defer tw.remove()
	if small == nil {
		small = map[string]bool{}
	}
	rep, sup, err := an.run(small, tw.write)
	if err != nil {
		return nil, err
	}
	if len(an.quasi) == 0 {
		rep.AboveThreshold = false // nothing identifies: no classes to speak of
	}
	table, err := tw.finish()
	if err != nil {
		return nil, err
	}
	table.Columns = cols
	js, err := json.Marshal(rep)
	if err != nil {
		return nil, fmt.Errorf("disclosure: %w", err)
	}
	sum := sha256.Sum256(js)
	out := &versionAttrs{table: table, report: js, sup: sup,
		ref: &DisclosureRef{SHA256: blob.ID(sum), Bytes: int64(len(js)), MaxRisk: rep.Risk.Max, AboveThreshold: rep.AboveThreshold}}
	if len(an.quasi) == 0 {
		out.ref.MaxRisk = 0
	}
	out.release = s.hold(table.SHA256)
	if err := s.putTemp(ctx, table.SHA256, tw.f); err != nil {
		out.release()
		return nil, fmt.Errorf("case attributes: %w", err)
	}
	return out, nil
}

// joinAttributes gathers, in one spilling counter keyed by case, what the
// version knows of its cases' attributes: every case of its case table,
// the parent's attribute table (unless replaced), the upload's rows, and
// the event-level sensitive values of en from its files.
func (s *Store) joinAttributes(ctx context.Context, parent *Version, files []FileEntry, caseTable *CaseTableEntry, ai *attrIngest, mode Mode, cols []AttributeColumn, en []string) (join *disclosure.Counter, err error) {
	join = disclosure.NewCounter(s.opt.TempDir, attrMemory)
	defer func() {
		if err != nil {
			join.Close()
		}
	}()
	var key []byte
	r, err := s.blobs.Open(ctx, caseTable.SHA256)
	if err != nil {
		return nil, fmt.Errorf("case attributes: %w", err)
	}
	err = ReadCaseTable(r, r.Size(), func(row *cases.Row) error {
		key = attrKey(key[:0], row.CaseID, '0', nil)
		return join.Add(string(key), 1)
	})
	r.Close()
	if err != nil {
		return nil, err
	}
	if parent != nil && mode != ModeReplaceAll && parent.Manifest.CaseAttributes != nil && sameColumns(parent.Manifest.CaseAttributes.Columns, cols) {
		err := s.readAttributeTable(ctx, parent.Manifest.CaseAttributes, cols, func(caseID string, vals []string) error {
			if parent.carryCase != nil { // a parent of an older key generation (rekey.go)
				var err error
				if caseID, err = parent.carryCase(caseID); err != nil {
					return err
				}
			}
			key = attrKey(key[:0], caseID, '1', vals)
			return join.Add(string(key), 1)
		})
		if err != nil {
			return nil, err
		}
	}
	if err := ai.rows.Each(func(k string, _ uint64) error { return join.Add(k, 1) }); err != nil {
		return nil, err
	}
	if err := s.eventSensitive(ctx, files, en, join); err != nil {
		return nil, err
	}
	return join, nil
}

// attrAnalysis is the disclosure analysis of a version's cases, read from
// the join: the attributes' roles, and the project's policy.
type attrAnalysis struct {
	pol         DisclosurePolicy
	join        *disclosure.Counter
	ncols       int
	dir         string
	quasi, sens []int    // indexes into the attributes
	qn, sn, en  []string // names: quasi-identifiers, sensitive, event-level sensitive
}

func newAttrAnalysis(attrs []schema.Attribute, en []string, pol DisclosurePolicy, join *disclosure.Counter, ncols int, dir string) *attrAnalysis {
	a := &attrAnalysis{pol: pol, join: join, ncols: ncols, dir: dir, en: en}
	for i, at := range attrs {
		switch at.Role {
		case schema.RoleQuasi:
			a.quasi, a.qn = append(a.quasi, i), append(a.qn, at.Name)
		case schema.RoleSensitive:
			a.sens, a.sn = append(a.sens, i), append(a.sn, at.Name)
		}
	}
	return a
}

// run analyses every case, blanking the quasi-identifiers of the cases in
// the small classes (nil: none) and handing each case's values to write
// (nil: none). With suppression asked for and small nil, classes below k
// end the run with a *suppressNeeded that lists them.
func (a *attrAnalysis) run(small map[string]bool, write func(caseID string, vals []string) error) (*disclosure.Report, int64, error) {
	pol := a.pol
	an := disclosure.New(disclosure.Options{Quasi: a.qn, Sensitive: a.sn, EventSensitive: a.en, K: pol.K, MaxRisk: pol.MaxRisk, Dir: a.dir, Memory: 4 * attrMemory})
	defer an.Close()
	q, sv := make([]string, len(a.quasi)), make([]string, len(a.sens))
	var conflicts, suppressed int64
	err := eachCase(a.join, a.ncols, len(a.en), func(caseID string, vals []string, events [][]string, conflict bool) error {
		if conflict {
			conflicts++
		}
		for j, i := range a.quasi {
			q[j] = vals[i]
		}
		if small != nil && small[disclosure.ClassKey(q)] {
			suppressed++
			for j, i := range a.quasi {
				vals[i], q[j] = "", ""
			}
		}
		for j, i := range a.sens {
			sv[j] = vals[i]
		}
		if write != nil {
			if err := write(caseID, vals); err != nil {
				return err
			}
		}
		return an.AddCase(q, sv, events)
	})
	if err != nil {
		return nil, 0, err
	}
	rep, err := an.Report()
	if err != nil {
		return nil, 0, err
	}
	rep.Conflicts = conflicts
	rep.Suppressed = suppressed
	if pol.Suppress && small == nil && rep.BelowK.Cases > 0 {
		sm, err := an.SmallClasses(maxSuppressClasses)
		if err != nil {
			return nil, 0, err
		}
		return rep, 0, &suppressNeeded{small: sm}
	}
	return rep, suppressed, nil
}

// maxSuppressClasses bounds the classes below k that suppression holds in
// memory (their keys); a version with more fails its commit by name.
const maxSuppressClasses = 1 << 20

type suppressNeeded struct{ small map[string]bool }

func (*suppressNeeded) Error() string { return "suppression needed" }

// eventSensitive adds to the join, for each event of files carrying a
// value of an event-level sensitive attribute named in names, the record
// case \0 "3" \0 attribute index \0 value: the counter keeps each once,
// so a case's records are the distinct values its events carry across
// the version's files. Files without those columns are not read; with no
// names, nothing is.
func (s *Store) eventSensitive(ctx context.Context, files []FileEntry, names []string, join *disclosure.Counter) error {
	if len(names) == 0 {
		return nil
	}
	var key []byte
	for _, f := range files {
		if f.Attributes == nil {
			continue
		}
		var pos, idx []int // position in the file's attributes, index in names
		for p, c := range f.Attributes.Columns() {
			if i := slices.Index(names, c.Name); i >= 0 && c.Role == schema.RoleSensitive {
				pos, idx = append(pos, p), append(idx, i)
			}
		}
		if len(pos) == 0 {
			continue
		}
		err := s.readFile(ctx, f.SHA256, func(e *schema.Event) error {
			for j, p := range pos {
				v := e.AttrValue(p)
				if v == "" || e.CaseID == "" {
					continue
				}
				key = attrKey(key[:0], e.CaseID, '3', []string{strconv.Itoa(idx[j]), v})
				if err := join.Add(string(key), 1); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("event attributes: %w", err)
		}
	}
	return nil
}

// eachCase walks the join's records case by case: for each case of the
// case table, its values are the upload's (the first in order when its
// rows gave several sets: conflict), else the parent's, else all NULL;
// events holds, for each of the m event-level sensitive attributes, the
// distinct values the case's events carry (nil when m is 0).
func eachCase(join *disclosure.Counter, n, m int, fn func(caseID string, vals []string, events [][]string, conflict bool) error) error {
	var cur string
	inTable, have, conflict := false, 0, false // have: 0 none, 1 parent's, 2 upload's
	vals := make([]string, n)
	var events [][]string
	if m > 0 {
		events = make([][]string, m)
	}
	flush := func() error {
		if !inTable {
			return nil
		}
		if have == 0 {
			clear(vals)
		}
		return fn(cur, vals, events, conflict)
	}
	started := false
	err := join.Each(func(k string, _ uint64) error {
		parts := strings.Split(k, "\x00")
		if len(parts) < 2 || len(parts[1]) != 1 {
			return fmt.Errorf("case attributes: a malformed record")
		}
		c, tag := parts[0], parts[1][0]
		if !started || c != cur {
			if started {
				if err := flush(); err != nil {
					return err
				}
			}
			started, cur, inTable, have, conflict = true, c, false, 0, false
			for i := range events {
				events[i] = events[i][:0]
			}
		}
		switch tag {
		case '0':
			inTable = true
		case '1', '2':
			if len(parts)-2 != n {
				return fmt.Errorf("case attributes: a record of %d values, want %d", len(parts)-2, n)
			}
			t := int(tag - '0')
			switch {
			case t > have:
				copy(vals, parts[2:])
				have = t
			case t == have && t == 2:
				conflict = true
			}
		case '3':
			i, err := strconv.Atoi(parts[2])
			if len(parts) != 4 || err != nil || i < 0 || i >= m {
				return fmt.Errorf("case attributes: a malformed event record")
			}
			events[i] = append(events[i], parts[3])
		}
		return nil
	})
	if err != nil {
		return err
	}
	if started {
		return flush()
	}
	return nil
}

func attributeColumns(attrs []schema.Attribute) []AttributeColumn {
	out := make([]AttributeColumn, len(attrs))
	for i := range attrs {
		a := &attrs[i]
		out[i] = AttributeColumn{Name: a.Name, Type: a.Type, Role: a.Role, Rule: a.Rule()}
	}
	return out
}

func sameColumns(a, b []AttributeColumn) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// attrNode is the Parquet node of an attribute: optional (NULL where a
// case has no value); codes and age bands as dictionary-encoded strings,
// integers INT64, dates DATE.
func attrNode(t schema.AttrType) parquet.Node {
	switch t {
	case schema.TypeInteger:
		return parquet.Optional(parquet.Int(64))
	case schema.TypeDate:
		return parquet.Optional(parquet.Date())
	}
	return parquet.Optional(parquet.Encoded(parquet.String(), &parquet.RLEDictionary))
}

// attrSchema is the Parquet schema of a case attribute table; leafs[i]
// is the attribute of leaf column i (-1 for case_id).
func attrSchema(attrs []schema.Attribute) (*parquet.Schema, []int) {
	g := parquet.Group{string(schema.FieldCaseID): parquet.Encoded(parquet.String(), &parquet.Plain)}
	for _, a := range attrs {
		g[a.Name] = attrNode(a.Type)
	}
	sch := parquet.NewSchema("case_attributes", g)
	leafs := make([]int, len(sch.Fields()))
	for i, f := range sch.Fields() {
		leafs[i] = -1
		for j := range attrs {
			if attrs[j].Name == f.Name() {
				leafs[i] = j
			}
		}
	}
	return sch, leafs
}

// attrTableWriter writes a case attribute table to a temporary file while
// hashing it, with the snapshot writer's fixed settings; rows carry their
// own definition levels, so NULLs are exact.
type attrTableWriter struct {
	*tempTable
	w      *columnWriter
	attrs  []schema.Attribute
	leafs  []int
	caseID []string          // the rows held, less than a batch
	vals   [][]parquet.Value // their values, by attribute (NULL where none)
	count  int64
}

func newAttrTableWriter(dir string, rowGroupRows int64, keyID string, attrs []schema.Attribute) (*attrTableWriter, error) {
	t, err := newTempTable(dir, "attributes-*.parquet", "case attributes")
	if err != nil {
		return nil, err
	}
	sch, leafs := attrSchema(attrs)
	tw := &attrTableWriter{tempTable: t, attrs: attrs, leafs: leafs, vals: make([][]parquet.Value, len(attrs))}
	tw.w = newColumnWriter(t.out(), sch, fileSettings{RowGroupRows: rowGroupRows,
		Metadata: []KeyValue{{"flowcat.pseudonym_key_id", keyID}, {"flowcat.table", "case_attributes"}}})
	return tw, nil
}

// write adds one row: its case and its values in attrs order ("" is
// NULL); vals may be reused once it returns.
func (tw *attrTableWriter) write(caseID string, vals []string) error {
	for j, a := range tw.attrs {
		v := vals[j]
		pv := parquet.NullValue()
		switch {
		case v == "":
		case a.Type == schema.TypeInteger:
			var n int64
			if _, err := fmt.Sscan(v, &n); err != nil {
				tw.truncate()
				return fmt.Errorf("case attributes: %s: %w", a.Name, err)
			}
			pv = parquet.Int64Value(n)
		case a.Type == schema.TypeDate:
			d, err := time.Parse(time.DateOnly, v)
			if err != nil {
				tw.truncate()
				return fmt.Errorf("case attributes: %s: %w", a.Name, err)
			}
			pv = parquet.Int32Value(int32(d.Unix() / 86400))
		default:
			pv = parquet.ByteArrayValue([]byte(v))
		}
		tw.vals[j] = append(tw.vals[j], pv)
	}
	tw.caseID = append(tw.caseID, caseID)
	tw.count++
	if len(tw.caseID) == writeBatch {
		return tw.flush()
	}
	return nil
}

// truncate drops the values of a row that was not added.
func (tw *attrTableWriter) truncate() {
	for j := range tw.vals {
		tw.vals[j] = tw.vals[j][:len(tw.caseID)]
	}
}

// values is the fillFunc of the rows held.
func (tw *attrTableWriter) values(dst []parquet.Value, col, i, j int) ([]parquet.Value, error) {
	a := tw.leafs[col]
	if a < 0 {
		for _, id := range tw.caseID[i:j] {
			dst = append(dst, parquet.ByteArrayValue([]byte(id)).Level(0, 0, col))
		}
		return dst, nil
	}
	for _, v := range tw.vals[a][i:j] {
		if v.IsNull() {
			dst = append(dst, v.Level(0, 0, col))
		} else {
			dst = append(dst, v.Level(0, 1, col))
		}
	}
	return dst, nil
}

func (tw *attrTableWriter) flush() error {
	if len(tw.caseID) == 0 {
		return nil
	}
	if err := tw.w.write(len(tw.caseID), tw.values); err != nil {
		return err
	}
	tw.caseID = tw.caseID[:0]
	for j := range tw.vals {
		clear(tw.vals[j])
		tw.vals[j] = tw.vals[j][:0]
	}
	return nil
}

func (tw *attrTableWriter) finish() (*AttributeTable, error) {
	if err := tw.flush(); err != nil {
		return nil, err
	}
	if err := tw.w.close(); err != nil {
		return nil, fmt.Errorf("case attributes: %w", err)
	}
	id, n, err := tw.done()
	if err != nil {
		return nil, err
	}
	return &AttributeTable{SHA256: id, Bytes: n, Rows: tw.count}, nil
}

func (tw *attrTableWriter) remove() { tw.drop() }

// readAttributeTable calls fn for every row of a stored case attribute
// table with its values in the order of cols ("" is NULL).
func (s *Store) readAttributeTable(ctx context.Context, t *AttributeTable, cols []AttributeColumn, fn func(caseID string, vals []string) error) error {
	r, err := s.blobs.Open(ctx, t.SHA256)
	if err != nil {
		return fmt.Errorf("case attributes: %w", err)
	}
	defer r.Close()
	return ReadAttributeTable(r, r.Size(), cols, fn)
}

// ReadAttributeTable reads a case attribute table file: fn gets each
// row's case_id and values in the order of cols ("" is NULL; dates as
// YYYY-MM-DD, integers in decimal).
func ReadAttributeTable(r io.ReaderAt, size int64, cols []AttributeColumn, fn func(caseID string, vals []string) error) error {
	f, err := parquet.OpenFile(r, size)
	if err != nil {
		return fmt.Errorf("case attributes: %w", err)
	}
	idx := make([]int, len(cols))
	for i, c := range cols {
		leaf, ok := f.Schema().Lookup(c.Name)
		if !ok {
			return fmt.Errorf("case attributes: the file has no column %s", c.Name)
		}
		idx[i] = leaf.ColumnIndex
	}
	cl, ok := f.Schema().Lookup(string(schema.FieldCaseID))
	if !ok {
		return fmt.Errorf("case attributes: the file has no case_id column")
	}
	vals := make([]string, len(cols))
	buf := make([]parquet.Row, 256)
	for _, rg := range f.RowGroups() {
		rows := rg.Rows()
		for {
			n, err := rows.ReadRows(buf)
			for _, row := range buf[:n] {
				var caseID string
				clear(vals)
				for _, v := range row {
					c := v.Column()
					if c == cl.ColumnIndex {
						caseID = string(v.ByteArray())
						continue
					}
					for i, ci := range idx {
						if ci != c || v.IsNull() {
							continue
						}
						switch cols[i].Type {
						case schema.TypeInteger:
							vals[i] = fmt.Sprint(v.Int64())
						case schema.TypeDate:
							vals[i] = time.Unix(int64(v.Int32())*86400, 0).UTC().Format(time.DateOnly)
						default:
							vals[i] = string(v.ByteArray())
						}
					}
				}
				if ferr := fn(caseID, vals); ferr != nil {
					rows.Close()
					return ferr
				}
			}
			if err == io.EOF {
				break
			}
			if err != nil {
				rows.Close()
				return fmt.Errorf("case attributes: %w", err)
			}
		}
		rows.Close()
	}
	return nil
}

// putDisclosure stores a version's disclosure report under its SHA-256.
func putDisclosure(tx *bolt.Tx, va *versionAttrs) error {
	if va == nil {
		return nil
	}
	b, err := tx.CreateBucketIfNotExists(bucketDisclosure)
	if err != nil {
		return err
	}
	return b.Put(va.ref.SHA256[:], va.report)
}

// AttributesPath is where a version's case attribute table goes in a
// pulled directory or bundle, beside the case table.
func AttributesPath(id blob.ID) string { return "cases/attributes-" + id.String() + ".parquet" }
