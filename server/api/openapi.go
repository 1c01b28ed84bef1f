package api

import (
	"encoding"
	"encoding/json"
	"fmt"
	"net/http"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/invopop/jsonschema"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
)

// OpenAPIVersion is the version of the OpenAPI Specification the document
// follows (https://spec.openapis.org/oas/v3.1.0); its schemas are JSON
// Schema 2020-12.
const OpenAPIVersion = "3.1.0"

// Operation is one endpoint as the OpenAPI document describes it. The
// server lists one for each route it registers, and the document is built
// from that list and the Go types it names, so it follows them.
type Operation struct {
	Method string
	// Path is the router's pattern: a ":name" segment is a path
	// parameter.
	Path    string
	Summary string
	// Public is an endpoint that takes no token.
	Public bool
	// Query are the query parameters the endpoint takes; "name*" may
	// repeat.
	Query []string
	// Body is a value of the JSON request body's type; nil for none.
	// BodyMedia, when set, is the media type of a body that is not JSON
	// (its schema is then a string of bytes).
	Body      any
	BodyMedia string
	// Responses are the answers other than errors; every error is a
	// Problem (the document's "default" response).
	Responses []Response
}

// Response is one answer of an operation.
type Response struct {
	Status int
	// Body is a value of the JSON body's type (application/json unless
	// Media says otherwise); nil for a body that is not JSON or none.
	Body any
	// Media is the media type of a body that is not JSON, or of a JSON
	// body other than application/json.
	Media string
}

// Document is the OpenAPI 3.1 document of ops, as JSON: every path and
// method, its parameters, request body, answers and their schemas, the
// schemas reflected from the Go types of the bodies (JSON Schema
// 2020-12, under components/schemas), and problem details for errors.
func Document(title, version string, ops []Operation) ([]byte, error) {
	g := newSchemas()
	paths := map[string]map[string]any{}
	problem := g.of(Problem{})
	for _, op := range ops {
		if op.Method == "" || op.Path == "" {
			return nil, fmt.Errorf("openapi: an operation without method or path: %+v", op)
		}
		path, params := openAPIPath(op.Path)
		item := paths[path]
		if item == nil {
			item = map[string]any{}
			paths[path] = item
		}
		method := strings.ToLower(op.Method)
		if _, dup := item[method]; dup {
			return nil, fmt.Errorf("openapi: %s %s listed twice", op.Method, op.Path)
		}
		for _, q := range op.Query {
			name, many := strings.CutSuffix(q, "*")
			p := map[string]any{"name": name, "in": "query", "required": false, "schema": map[string]any{"type": "string"}}
			if many {
				p["schema"] = map[string]any{"type": "array", "items": map[string]any{"type": "string"}}
				p["style"], p["explode"] = "form", true
			}
			params = append(params, p)
		}
		o := map[string]any{
			"operationId": operationID(op),
			"summary":     op.Summary,
			"responses":   map[string]any{},
		}
		if len(params) > 0 {
			o["parameters"] = params
		}
		if op.Public {
			o["security"] = []any{}
		}
		switch {
		case op.BodyMedia != "":
			o["requestBody"] = map[string]any{"required": true, "content": map[string]any{
				op.BodyMedia: map[string]any{"schema": map[string]any{"type": "string", "contentMediaType": op.BodyMedia}},
			}}
		case op.Body != nil:
			o["requestBody"] = map[string]any{"content": map[string]any{"application/json": map[string]any{"schema": g.of(op.Body)}}}
		}
		rs := o["responses"].(map[string]any)
		for _, r := range op.Responses {
			key := strconv.Itoa(r.Status)
			resp, ok := rs[key].(map[string]any)
			if !ok {
				resp = map[string]any{"description": http.StatusText(r.Status)}
				rs[key] = resp
			}
			var media any = map[string]any{}
			switch {
			case r.Body != nil:
				media = map[string]any{"schema": g.of(r.Body)}
			case r.Media != "":
				media = map[string]any{"schema": map[string]any{"type": "string", "contentMediaType": r.Media}}
			}
			if r.Body == nil && r.Media == "" {
				continue // no body
			}
			mt := r.Media
			if mt == "" {
				mt = "application/json"
			}
			content, _ := resp["content"].(map[string]any)
			if content == nil {
				content = map[string]any{}
				resp["content"] = content
			}
			content[mt] = media
		}
		rs["default"] = map[string]any{"description": "An error, as problem details (RFC 9457)",
			"content": map[string]any{ProblemMedia: map[string]any{"schema": problem}}}
		item[method] = o
	}
	if err := g.err(); err != nil {
		return nil, err
	}
	doc := map[string]any{
		"openapi":           OpenAPIVersion,
		"jsonSchemaDialect": "https://json-schema.org/draft/2020-12/schema",
		"info":              map[string]any{"title": title, "version": version},
		"paths":             paths,
		"components": map[string]any{
			"schemas": g.defs,
			"securitySchemes": map[string]any{"bearer": map[string]any{
				"type": "http", "scheme": "bearer", "bearerFormat": "JWT"}},
		},
		"security": []any{map[string]any{"bearer": []any{}}},
	}
	b, err := json.Marshal(doc)
	if err != nil {
		return nil, err
	}
	// invopop/jsonschema refers to definitions under #/$defs; the document
	// keeps them under #/components/schemas.
	return []byte(strings.ReplaceAll(string(b), `"#/$defs/`, `"#/components/schemas/`)), nil
}

// openAPIPath turns a router pattern into an OpenAPI path template and its
// path parameters.
func openAPIPath(pattern string) (string, []any) {
	segs := strings.Split(pattern, "/")
	var params []any
	for i, s := range segs {
		if name, ok := strings.CutPrefix(s, ":"); ok {
			segs[i] = "{" + name + "}"
			params = append(params, map[string]any{"name": name, "in": "path", "required": true, "schema": map[string]any{"type": "string"}})
		}
	}
	return strings.Join(segs, "/"), params
}

// OpenAPIPath is the OpenAPI path template of a router pattern:
// "/a/:b" is "/a/{b}".
func OpenAPIPath(pattern string) string {
	p, _ := openAPIPath(pattern)
	return p
}

func operationID(op Operation) string {
	var b strings.Builder
	b.WriteString(strings.ToLower(op.Method))
	for _, s := range strings.Split(op.Path, "/") {
		s = strings.TrimPrefix(s, ":")
		if s == "" || s == "api" || s == "v1" {
			continue
		}
		for _, part := range strings.FieldsFunc(s, func(r rune) bool { return r == '-' || r == '.' || r == '_' }) {
			b.WriteString(strings.ToUpper(part[:1]) + part[1:])
		}
	}
	return b.String()
}

// schemas reflects Go types into JSON Schema definitions.
type schemas struct {
	r     *jsonschema.Reflector
	defs  map[string]*jsonschema.Schema
	types map[string]reflect.Type // definition name -> Go type
	fixed map[string]bool
	errs  []string
}

var (
	textMarshaler = reflect.TypeFor[encoding.TextMarshaler]()
	jsonMarshaler = reflect.TypeFor[json.Marshaler]()
	rawMessage    = reflect.TypeFor[json.RawMessage]()
	timeType      = reflect.TypeFor[time.Time]()
	numType       = reflect.TypeFor[summary.Num]()
)

func newSchemas() *schemas {
	g := &schemas{defs: map[string]*jsonschema.Schema{}, types: map[string]reflect.Type{}, fixed: map[string]bool{}}
	g.r = &jsonschema.Reflector{
		// Every member a type does not declare is an error: the document
		// must say all the server sends.
		AllowAdditionalProperties: false,
		Namer: func(t reflect.Type) string {
			name := t.Name()
			if pkg := t.PkgPath(); pkg != "" && !strings.HasSuffix(pkg, "/server/api") {
				name = pkg[strings.LastIndexByte(pkg, '/')+1:] + "." + name
			}
			g.types[name] = t
			return name
		},
		Mapper: mapType,
	}
	return g
}

// mapType gives the schema of the types that encode themselves: time
// stamps (RFC 3339), identifiers that encode as text, summary.Num (a number
// or null), raw JSON (anything); nil for the others, which are reflected.
func mapType(t reflect.Type) *jsonschema.Schema {
	switch {
	case t == timeType:
		return &jsonschema.Schema{Type: "string", Format: "date-time"}
	case t == numType:
		return &jsonschema.Schema{AnyOf: []*jsonschema.Schema{{Type: "number"}, {Type: "null"}}}
	case t == rawMessage:
		return &jsonschema.Schema{}
	case t.Implements(jsonMarshaler) || reflect.PointerTo(t).Implements(jsonMarshaler):
		// A type with its own JSON encoding and no schema of it here.
		return &jsonschema.Schema{}
	case t.Implements(textMarshaler) || reflect.PointerTo(t).Implements(textMarshaler):
		return &jsonschema.Schema{Type: "string"}
	}
	return nil
}

// of is the schema of v's type (a $ref for a named struct), its
// definitions added to g.defs.
func (g *schemas) of(v any) *jsonschema.Schema {
	t := reflect.TypeOf(v)
	s := g.r.ReflectFromType(t)
	for name, d := range s.Definitions {
		if _, ok := g.defs[name]; !ok {
			g.defs[name] = d
		}
	}
	s.Definitions, s.Version, s.ID = nil, "", ""
	for name := range g.defs {
		if !g.fixed[name] {
			g.fixed[name] = true
			g.nullable(g.defs[name], g.types[name])
		}
	}
	return s
}

func (g *schemas) err() error {
	if len(g.errs) > 0 {
		return fmt.Errorf("openapi: %s", strings.Join(g.errs, "; "))
	}
	return nil
}

// nullable lets the values of type t that encoding/json writes as null
// be null: struct members, map values and slice items that are pointers,
// slices or maps (a nil one is null), but not members with omitempty.
// Unnamed types are followed; named ones are definitions of their own.
func (g *schemas) nullable(s *jsonschema.Schema, t reflect.Type) {
	if s == nil || t == nil {
		return
	}
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if mapType(t) != nil {
		return
	}
	inner := func(p *jsonschema.Schema, et reflect.Type, omitempty bool) *jsonschema.Schema {
		if et.Name() == "" {
			g.nullable(p, et)
		}
		if !omitempty && canBeNull(et) {
			return &jsonschema.Schema{AnyOf: []*jsonschema.Schema{p, {Type: "null"}}}
		}
		return p
	}
	switch t.Kind() {
	case reflect.Slice, reflect.Array:
		if s.Items != nil {
			s.Items = inner(s.Items, t.Elem(), false)
		}
	case reflect.Map:
		if s.AdditionalProperties != nil {
			s.AdditionalProperties = inner(s.AdditionalProperties, t.Elem(), false)
		}
	case reflect.Struct:
		if s.Properties == nil {
			return
		}
		for _, f := range jsonFields(t) {
			p, ok := s.Properties.Get(f.name)
			if !ok {
				g.errs = append(g.errs, fmt.Sprintf("%s: member %q not in its schema", t, f.name))
				continue
			}
			s.Properties.Set(f.name, inner(p, f.typ, f.omitempty))
		}
	}
}

// canBeNull reports whether encoding/json may write a value of t as null.
func canBeNull(t reflect.Type) bool {
	switch t.Kind() {
	case reflect.Pointer:
		return true
	case reflect.Slice, reflect.Map:
		return mapType(t) == nil
	}
	return false
}

type jsonField struct {
	name      string
	typ       reflect.Type
	omitempty bool
}

// jsonFields are the members encoding/json writes for struct type t,
// embedded structs' members included.
func jsonFields(t reflect.Type) []jsonField {
	var out []jsonField
	for i := range t.NumField() {
		f := t.Field(i)
		tag := f.Tag.Get("json")
		if tag == "-" {
			continue
		}
		name, opts, _ := strings.Cut(tag, ",")
		ft := f.Type
		if f.Anonymous && name == "" {
			et := ft
			if et.Kind() == reflect.Pointer {
				et = et.Elem()
			}
			if et.Kind() == reflect.Struct {
				out = append(out, jsonFields(et)...)
				continue
			}
		}
		if !f.IsExported() {
			continue
		}
		if name == "" {
			name = f.Name
		}
		out = append(out, jsonField{name: name, typ: ft, omitempty: slices.Contains(strings.Split(opts, ","), "omitempty")})
	}
	return out
}
