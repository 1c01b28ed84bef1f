package export

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"maps"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// A layout is a version's events as a Hive-style partitioned tree of
// Parquet files, which query engines read in place and prune by its
// folder names (the convention of Apache Hive's partitioned tables, read
// by DuckDB, Spark, Arrow, Polars and others; common practice):
//
//	site=<site>/date=<YYYY-MM-DD>/part-0.parquet
//
// one file per site and day (the day in the zone LayoutOptions gives).
// A site is written with every byte other than ASCII letters, digits,
// '-', '_' and '.' as %XX, as Hive escapes partition values. The files
// hold every column but site (the folder holds it), in the order of
// Events, written by the catalog's one Parquet writer.

// LayoutFileName is the name of the one file of each partition.
const LayoutFileName = "part-0.parquet"

// LayoutRowGroupRows is the row group size of layout files unless
// LayoutOptions says.
const LayoutRowGroupRows = 32 << 10

// LayoutOpenPartitions bounds the partition files written at once: a day
// of more sites is written in several passes over that day.
const LayoutOpenPartitions = 8

// openPartitions is LayoutOpenPartitions; tests lower it.
var openPartitions = LayoutOpenPartitions

// LayoutColumns are the columns of a layout file: every field but site.
var LayoutColumns = slices.DeleteFunc(slices.Clone(schema.Fields), func(f schema.Field) bool { return f == schema.FieldSite })

// LayoutOptions tune WriteLayout.
type LayoutOptions struct {
	// Zone gives the day of each event (date=); default UTC. A dataset's
	// own zone gives the days its sites live by.
	Zone *time.Location
	// RowGroupRows bounds a row group; default LayoutRowGroupRows.
	RowGroupRows int64
	// Metadata is added to each file's key-value metadata (sorted by
	// key), such as the dataset, version and snapshot id.
	Metadata map[string]string
}

// LayoutFile is one file of a layout.
type LayoutFile struct {
	Path   string `json:"path"` // slash-separated, relative to the layout's root
	Site   string `json:"site"`
	Date   string `json:"date"`
	Rows   int64  `json:"rows"`
	Bytes  int64  `json:"bytes"`
	SHA256 string `json:"sha256"`
}

// PartitionPath is the path of the file of site on date (YYYY-MM-DD).
func PartitionPath(site, date string) string {
	return "site=" + escapePartition(site) + "/date=" + date + "/" + LayoutFileName
}

// escapePartition writes every byte but ASCII letters, digits, '-', '_'
// and '.' as %XX (uppercase hex).
func escapePartition(s string) string {
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '-' || c == '_' || c == '.' {
			b.WriteByte(c)
		} else {
			fmt.Fprintf(&b, "%%%02X", c)
		}
	}
	return b.String()
}

// WriteLayout writes the events of files as a layout under dir, which it
// creates and which must not exist yet or be empty. It reads the version
// once to count the events of each partition, then each day again for
// every LayoutOpenPartitions of its sites (only the files and row groups
// of that day), writing those partitions; at most LayoutOpenPartitions
// files, each holding one row group being built, are open at once. It
// returns the files written, sorted by path. On an error the files
// written so far stay under dir: the caller writes into a folder of its
// own and removes it.
func WriteLayout(ctx context.Context, src Source, files []catalog.FileEntry, dir string, opt LayoutOptions) ([]LayoutFile, error) {
	zone := opt.Zone
	if zone == nil {
		zone = time.UTC
	}
	rows := opt.RowGroupRows
	if rows <= 0 {
		rows = LayoutRowGroupRows
	}
	if ents, err := os.ReadDir(dir); err == nil && len(ents) > 0 {
		return nil, fmt.Errorf("layout: %s is not empty", dir)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("layout: %w", err)
	}
	var kv []catalog.KeyValue
	for _, k := range slices.Sorted(maps.Keys(opt.Metadata)) {
		kv = append(kv, catalog.KeyValue{Key: k, Value: opt.Metadata[k]})
	}

	// Pass 1: the partitions and their rows.
	type day struct {
		start time.Time
		sites map[string]int64
	}
	days := map[string]*day{}
	_, err := Events(ctx, src, files, Filter{}, func(e *schema.Event) error {
		t := e.OccurredAt.In(zone)
		key := t.Format(time.DateOnly)
		d := days[key]
		if d == nil {
			d = &day{start: time.Date(t.Year(), t.Month(), t.Day(), 0, 0, 0, 0, zone), sites: map[string]int64{}}
			days[key] = d
		}
		d.sites[e.Site]++
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("layout: %w", err)
	}

	// Pass 2: each day, a group of sites at a time.
	var out []LayoutFile
	for _, key := range slices.Sorted(maps.Keys(days)) {
		d := days[key]
		end := time.Date(d.start.Year(), d.start.Month(), d.start.Day()+1, 0, 0, 0, 0, zone)
		sites := slices.Sorted(maps.Keys(d.sites))
		for lo := 0; lo < len(sites); lo += openPartitions {
			group := sites[lo:min(lo+openPartitions, len(sites))]
			written, err := writePartitions(ctx, src, files, dir, key, d.start, end, group, rows, kv)
			if err != nil {
				return nil, err
			}
			for _, f := range written {
				if f.Rows != d.sites[f.Site] {
					return nil, fmt.Errorf("layout: %s: %d rows written, %d counted", f.Path, f.Rows, d.sites[f.Site])
				}
			}
			out = append(out, written...)
		}
	}
	slices.SortFunc(out, func(a, b LayoutFile) int { return strings.Compare(a.Path, b.Path) })
	return out, nil
}

// partition is one layout file being written.
type partition struct {
	f   *os.File
	h   hashCounter
	w   *catalog.EventWriter
	out LayoutFile
}

type hashCounter struct {
	h interface {
		io.Writer
		Sum([]byte) []byte
	}
	n int64
}

func (c *hashCounter) Write(p []byte) (int, error) {
	c.n += int64(len(p))
	return c.h.Write(p)
}

// writePartitions writes the partitions of sites on one day [start, end).
func writePartitions(ctx context.Context, src Source, files []catalog.FileEntry, dir, date string, start, end time.Time, sites []string, rows int64, kv []catalog.KeyValue) (out []LayoutFile, err error) {
	attrs, err := exportAttributes(files, Filter{})
	if err != nil {
		return nil, err
	}
	parts := map[string]*partition{}
	defer func() {
		for _, p := range parts {
			p.f.Close()
		}
	}()
	for _, site := range sites {
		rel := PartitionPath(site, date)
		path := filepath.Join(dir, filepath.FromSlash(rel))
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			return nil, fmt.Errorf("layout: %w", err)
		}
		f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
		if err != nil {
			return nil, fmt.Errorf("layout: %w", err)
		}
		p := &partition{f: f, out: LayoutFile{Path: rel, Site: site, Date: date}}
		p.h.h = sha256.New()
		p.w = catalog.NewEventWriter(io.MultiWriter(f, &p.h), LayoutColumns, catalog.EventWriterOptions{RowGroupRows: rows, Metadata: kv, Attrs: attrs})
		parts[site] = p
	}
	_, err = Events(ctx, src, files, Filter{From: start, To: end, Sites: sites}, func(e *schema.Event) error {
		p := parts[e.Site]
		p.out.Rows++
		return p.w.Write(e)
	})
	if err != nil {
		return nil, fmt.Errorf("layout: %w", err)
	}
	for _, site := range sites {
		p := parts[site]
		if err := p.w.Close(); err != nil {
			return nil, fmt.Errorf("layout: %s: %w", p.out.Path, err)
		}
		if err := p.f.Sync(); err != nil {
			return nil, fmt.Errorf("layout: %w", err)
		}
		if err := p.f.Close(); err != nil {
			return nil, fmt.Errorf("layout: %w", err)
		}
		delete(parts, site)
		p.out.Bytes = p.h.n
		p.out.SHA256 = hex.EncodeToString(p.h.h.Sum(nil))
		out = append(out, p.out)
	}
	return out, nil
}

// DirSource reads a version's event files from a pulled directory, where
// each is data/<sha256>.parquet (catalog.DataPath); temporary files of
// staged merges go to tmp (default os.TempDir()).
func DirSource(dir, tmp string) Source {
	return Source{TempDir: tmp, Open: func(ctx context.Context, id blob.ID) (blob.Reader, error) {
		f, err := os.Open(filepath.Join(dir, filepath.FromSlash(catalog.DataPath(id))))
		if err != nil {
			return nil, err
		}
		fi, err := f.Stat()
		if err != nil {
			f.Close()
			return nil, err
		}
		return &sizedFile{File: f, size: fi.Size()}, nil
	}}
}

type sizedFile struct {
	*os.File
	size int64
}

func (f *sizedFile) Size() int64 { return f.size }

// LayoutIndexName is the file beside a layout's partitions that lists
// them; ManifestName, beside it, is the version's manifest as stored (its
// SHA-256 is the snapshot id).
const (
	LayoutIndexName = "layout.json"
	ManifestName    = "manifest.json"
)

// LayoutIndex describes a layout: the version it holds, the zone of its
// days, and each file with its rows and SHA-256.
type LayoutIndex struct {
	Dataset    string       `json:"dataset"`
	Version    int          `json:"version"`
	SnapshotID string       `json:"snapshot_id"`
	Zone       string       `json:"zone"`
	Partitions []string     `json:"partitioned_by"`
	Rows       int64        `json:"rows"`
	Files      []LayoutFile `json:"files"`
}

// Marshal returns the index as indented JSON and a newline.
func (ix *LayoutIndex) Marshal() []byte {
	b, _ := json.MarshalIndent(ix, "", "  ")
	return append(b, '\n')
}

// NewLayoutIndex makes the index of files written for a version.
func NewLayoutIndex(dataset string, version int, snapshot string, zone *time.Location, files []LayoutFile) *LayoutIndex {
	if zone == nil {
		zone = time.UTC
	}
	ix := &LayoutIndex{Dataset: dataset, Version: version, SnapshotID: snapshot, Zone: zone.String(),
		Partitions: []string{"site", "date"}, Files: files}
	for _, f := range files {
		ix.Rows += f.Rows
	}
	return ix
}
