// Package web holds the catalog's pages for people: html/template
// templates and their static assets, embedded in the binary, and the SVG
// charts the server draws from a version's summary and a dataset's
// quality trend. It does no I/O of its own beyond writing a page: the
// server reads the catalog and hands each page its data.
package web

import (
	"bytes"
	"embed"
	"fmt"
	"html/template"
	"io"
	"io/fs"
	"math"
	"strconv"
	"strings"
	"time"
)

//go:embed templates/*.html
var templateFS embed.FS

//go:embed static
var staticFS embed.FS

// Static holds the pages' assets (the style sheet), served under /static/.
var Static, _ = fs.Sub(staticFS, "static")

// Pages names the templates Render knows.
var Pages = []string{"signin", "error", "catalog", "dataset", "version"}

var pages = map[string]*template.Template{}

var funcs = template.FuncMap{
	"duration": Duration,
	"percent":  Percent,
	"score": func(p *float64) string {
		if p == nil {
			return "-"
		}
		return strconv.FormatFloat(*p, 'f', 1, 64)
	},
	"num": func(v any) string {
		switch x := v.(type) {
		case float64:
			return trimmed(x)
		case int64:
			return groupDigits(strconv.FormatInt(x, 10))
		case int:
			return groupDigits(strconv.Itoa(x))
		case uint64:
			return groupDigits(strconv.FormatUint(x, 10))
		}
		return fmt.Sprint(v)
	},
	"when": func(t any) string {
		switch x := t.(type) {
		case time.Time:
			if x.IsZero() {
				return "-"
			}
			return x.UTC().Format("2006-01-02 15:04 UTC")
		case *time.Time:
			if x == nil || x.IsZero() {
				return "-"
			}
			return x.UTC().Format("2006-01-02 15:04 UTC")
		}
		return "-"
	},
	"day": func(t *time.Time) string {
		if t == nil {
			return "-"
		}
		return t.UTC().Format("2006-01-02")
	},
	"short": func(s fmt.Stringer) string {
		v := s.String()
		if len(v) > 12 {
			return v[:12]
		}
		return v
	},
	"join":  strings.Join,
	"plot":  func(p *Plot) template.HTML { return p.SVG() },
	"isnan": math.IsNaN,
	"add":   func(a, b int) int { return a + b },
}

func groupDigits(s string) string {
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	for i, r := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteRune(',')
		}
		b.WriteRune(r)
	}
	if neg {
		return "-" + b.String()
	}
	return b.String()
}

func init() {
	base := template.Must(template.New("base.html").Funcs(funcs).ParseFS(templateFS, "templates/base.html"))
	for _, name := range Pages {
		t := template.Must(base.Clone())
		pages[name] = template.Must(t.ParseFS(templateFS, "templates/"+name+".html"))
	}
}

// Page is what every page gets: its title, who is signed in (nil for a
// visitor), the form token that every form carries, and its own content.
type Page struct {
	Title   string
	Viewer  *Viewer
	CSRF    string
	Crumbs  []Crumb
	Content any
}

// Viewer is who is signed in, as the token says.
type Viewer struct {
	Subject  string
	Role     string
	Project  string
	Datasets []string
	Expires  time.Time
}

// Crumb is one step of the trail from the catalog to the page.
type Crumb struct {
	Label, Href string
}

// Render writes page name with p to w. It renders to memory first, so
// that a template error never leaves half a page.
func Render(w io.Writer, name string, p *Page) error {
	t, ok := pages[name]
	if !ok {
		return fmt.Errorf("web: no page %q", name)
	}
	var buf bytes.Buffer
	if err := t.ExecuteTemplate(&buf, "base.html", p); err != nil {
		return fmt.Errorf("web: page %s: %w", name, err)
	}
	_, err := w.Write(buf.Bytes())
	return err
}
