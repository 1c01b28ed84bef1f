package web

import (
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
)

// SignIn is the sign-in page: where to go after, and what went wrong
// with the last token, if anything.
type SignIn struct {
	Next    string
	Problem string
}

// ErrorPage tells what went wrong, in one sentence.
type ErrorPage struct {
	Status  int
	Heading string
	Message string
}

// Catalog is the list of projects and datasets a reader may see, after
// the filters.
type Catalog struct {
	Q, Site, From, To, Project string
	Sites                      []string // every site of the visible datasets, for the filter
	ProjectNames               []string
	Projects                   []CatalogProject
	Shown, Total               int
	Partner                    bool
	Problem                    string
}

// CatalogProject is one project with its datasets.
type CatalogProject struct {
	Name, Title string
	Datasets    []CatalogDataset
}

// CatalogDataset is one dataset's line in the catalog: its sites and time
// range (of its latest version the reader sees), that version and its
// score, and the alerts of the newest upload of each site.
type CatalogDataset struct {
	Project, Name, Title string
	Sites                []string
	From, To             *time.Time
	Latest               int
	State                catalog.State
	Score                *float64
	OpenAlerts           int
	Uploads              int
	Readable             bool
}

// DatasetPage is one dataset.
type DatasetPage struct {
	D           *catalog.Dataset
	Readable    bool // members, curators, admins: versions, trend, citation
	Curator     bool
	Partner     bool
	Sites       []string
	Versions    []VersionRow
	NextAfter   int
	Trends      []*Plot
	Alerts      []catalog.UploadAlert
	AlertsMore  int
	Uploads     []catalog.Upload
	UploadsMore int
	Cite        *catalog.Version // the version the pull command and citation name
	Pull        string
	Citation    string
	// Audit is the dataset's newest audit entries, shown to curators;
	// AuditMore says older ones exist.
	Audit     []catalog.AuditEntry
	AuditMore bool
}

// VersionRow is a line of the versions table.
type VersionRow struct {
	catalog.Version
	Parent   int
	Cases    int64
	HasCases bool
	Lineage  catalog.Lineage
}

// VersionPage is one version.
type VersionPage struct {
	D          *catalog.Dataset
	V          *catalog.Version
	Base       string // the page's path, for its forms and downloads
	Report     *quality.Report
	Summary    *summary.Summary
	Figures    []Figure
	Curator    bool
	Others     []catalog.Version // versions to compare with
	DiffWith   int
	Diff       any
	Citation   string
	Pull       string
	Files      []catalog.BlobEntry
	Sites      []string
	Queues     []string
	Activities []string
	Columns    []string
	Types      []string
	// Disclosure is the version's disclosure report, where its profile
	// declares attributes.
	Disclosure *disclosure.Report
}

// Figure is one chart of a page with its heading and a note.
type Figure struct {
	Heading string
	Note    string
	Plot    *Plot
}

// VersionFigures lists the charts of a version's summary that its data
// can draw: arrivals by hour of the week, waits and patience per queue,
// service times per activity, length of stay, occupancy with Little's
// law, and the process paths when a per-case pass made them.
func VersionFigures(s *summary.Summary) []Figure {
	var out []Figure
	add := func(h, note string, p *Plot) {
		if p != nil {
			out = append(out, Figure{Heading: h, Note: note, Plot: p})
		}
	}
	add("Arrivals", "Bars are the mean arrivals per hour in each hour of the week; the thin lines their 95% interval (exact Poisson).", ArrivalsByHourOfWeek(s))
	add("Waiting", "Percentiles of the waits that ended in a service, then each queue's waits in bins growing 1-2-5.", WaitQuantiles(s))
	for i := range s.Queues {
		add("", "", WaitHistogram(&s.Queues[i]))
		add("", "", Patience(&s.Queues[i]))
	}
	n := 0
	for i := range s.Activities {
		if n == 6 {
			break
		}
		if p := ServiceTime(&s.Activities[i]); p != nil {
			add("", "", p)
			n++
		}
	}
	add("Length of stay", "", LengthOfStay(s))
	add("Occupancy", "The dashed lines are the two sides of Little's law, measured apart; where they part, stays were lost or cut by the window.", Occupancy(s))
	add("Process paths", "", Variants(s.Process))
	return out
}
