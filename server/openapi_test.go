package server

import (
	"bytes"
	"fmt"
	"io"
	"log/slog"
	"maps"
	"net/http"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/santhosh-tekuri/jsonschema/v6"

	"beamledger/accounts"
)

// docLocation names the OpenAPI document as a JSON Schema resource; schemas inside it
// are compiled by JSON pointer, and their $refs to #/components/schemas resolve within it.
const docLocation = "openapi.json"

// httpMethods are the OpenAPI path-item keys that are operations.
var httpMethods = []string{"get", "put", "post", "delete", "options", "head", "patch", "trace"}

// apiDoc is the parsed OpenAPI document with a schema compiler over it.
type apiDoc struct {
	root     map[string]any
	ops      []*apiOperation
	compiler *jsonschema.Compiler
	mu       sync.Mutex
	compiled map[string]*jsonschema.Schema
}

// apiOperation is one method on one documented path.
type apiOperation struct {
	Method   string // upper case, as on the wire
	Path     string // the template, such as /api/v1/users/{user_id}
	Pointer  string // JSON pointer of the operation object, such as #/paths/~1healthz/get
	Op       map[string]any
	Item     map[string]any // the path item, for path-level parameters
	pattern  *regexp.Regexp
	numParam int
}

var (
	docOnce   sync.Once
	sharedDoc *apiDoc
	docErr    error
)

// loadAPIDoc parses the served document once per test binary.
func loadAPIDoc() (*apiDoc, error) {
	docOnce.Do(func() { sharedDoc, docErr = parseAPIDoc() })
	return sharedDoc, docErr
}

func parseAPIDoc() (*apiDoc, error) {
	raw, err := openapiJSON()
	if err != nil {
		return nil, err
	}
	v, err := jsonschema.UnmarshalJSON(bytes.NewReader(raw))
	if err != nil {
		return nil, err
	}
	root, ok := v.(map[string]any)
	if !ok {
		return nil, fmt.Errorf("openapi document is not an object")
	}
	c := jsonschema.NewCompiler()
	c.DefaultDraft(jsonschema.Draft2020)
	c.AssertFormat()
	// The server accepts internationalised addresses (RFC 6531) and always sends them
	// normalised, so an address is well formed when the server's own rule keeps it as is.
	c.RegisterFormat(&jsonschema.Format{Name: "idn-email", Validate: func(v any) error {
		s, ok := v.(string)
		if !ok {
			return nil
		}
		if got, err := accounts.NormalizeEmail(s); err != nil || got != s {
			return fmt.Errorf("%q is not a normalised email address", s)
		}
		return nil
	}})
	if err := c.AddResource(docLocation, root); err != nil {
		return nil, err
	}
	d := &apiDoc{root: root, compiler: c, compiled: map[string]*jsonschema.Schema{}}
	paths, _ := root["paths"].(map[string]any)
	for _, p := range slices.Sorted(maps.Keys(paths)) {
		item, _ := paths[p].(map[string]any)
		pattern, n := templatePattern(p)
		for _, m := range httpMethods {
			op, ok := item[m].(map[string]any)
			if !ok {
				continue
			}
			d.ops = append(d.ops, &apiOperation{
				Method: strings.ToUpper(m), Path: p, Pointer: "#/paths/" + escapePointer(p) + "/" + m,
				Op: op, Item: item, pattern: pattern, numParam: n,
			})
		}
	}
	return d, nil
}

// templatePattern turns a path template into a regular expression. A trailing {path}
// takes the rest of the URL, slashes included, as echo's * does.
func templatePattern(template string) (*regexp.Regexp, int) {
	var b strings.Builder
	n := 0
	for _, seg := range strings.Split(template, "/")[1:] {
		b.WriteString("/")
		switch {
		case seg == "{path}":
			b.WriteString(".*")
			n++
		case strings.HasPrefix(seg, "{") && strings.HasSuffix(seg, "}"):
			b.WriteString("[^/]+")
			n++
		default:
			b.WriteString(regexp.QuoteMeta(seg))
		}
	}
	return regexp.MustCompile("^" + b.String() + "$"), n
}

func escapePointer(s string) string {
	return strings.NewReplacer("~", "~0", "/", "~1").Replace(s)
}

// operation finds the documented operation for a concrete request path (query string
// ignored); a literal segment wins over a parameter.
func (d *apiDoc) operation(method, path string) *apiOperation {
	path, _, _ = strings.Cut(path, "?")
	var best *apiOperation
	for _, op := range d.ops {
		if op.Method == method && op.pattern.MatchString(path) && (best == nil || op.numParam < best.numParam) {
			best = op
		}
	}
	return best
}

// template finds the operation documented for a method and path template.
func (d *apiDoc) template(method, template string) *apiOperation {
	for _, op := range d.ops {
		if op.Method == method && op.Path == template {
			return op
		}
	}
	return nil
}

// resolve follows a local $ref to the object it names, returning the object and its
// pointer. Objects without $ref come back with the pointer given.
func (d *apiDoc) resolve(v any, pointer string) (map[string]any, string, error) {
	for range 10 {
		m, ok := v.(map[string]any)
		if !ok {
			return nil, pointer, fmt.Errorf("%s is not an object", pointer)
		}
		ref, ok := m["$ref"].(string)
		if !ok {
			return m, pointer, nil
		}
		target, err := d.lookup(ref)
		if err != nil {
			return nil, pointer, err
		}
		v, pointer = target, ref
	}
	return nil, pointer, fmt.Errorf("%s: $ref chain too long", pointer)
}

// lookup returns the value at a local JSON pointer such as #/components/schemas/User.
func (d *apiDoc) lookup(pointer string) (any, error) {
	rest, ok := strings.CutPrefix(pointer, "#")
	if !ok {
		return nil, fmt.Errorf("$ref %q is not local to the document", pointer)
	}
	var v any = d.root
	if rest == "" {
		return v, nil
	}
	unescape := strings.NewReplacer("~1", "/", "~0", "~")
	for _, tok := range strings.Split(strings.TrimPrefix(rest, "/"), "/") {
		m, ok := v.(map[string]any)
		if !ok {
			return nil, fmt.Errorf("%s: %q is inside a non-object", pointer, tok)
		}
		if v, ok = m[unescape.Replace(tok)]; !ok {
			return nil, fmt.Errorf("%s does not exist", pointer)
		}
	}
	return v, nil
}

// schema compiles (once) the schema at a pointer into the document.
func (d *apiDoc) schema(pointer string) (*jsonschema.Schema, error) {
	d.mu.Lock()
	defer d.mu.Unlock()
	if s, ok := d.compiled[pointer]; ok {
		return s, nil
	}
	s, err := d.compiler.Compile(docLocation + pointer)
	if err != nil {
		return nil, err
	}
	d.compiled[pointer] = s
	return s, nil
}

// response returns the documented response of op for a status, and its pointer after
// following $ref.
func (d *apiDoc) response(op *apiOperation, status int) (map[string]any, string, bool, error) {
	responses, _ := op.Op["responses"].(map[string]any)
	r, ok := responses[strconv.Itoa(status)]
	if !ok {
		return nil, "", false, nil
	}
	m, ptr, err := d.resolve(r, op.Pointer+"/responses/"+strconv.Itoa(status))
	return m, ptr, true, err
}

// statuses lists the documented statuses of op.
func (op *apiOperation) statuses() []int {
	responses, _ := op.Op["responses"].(map[string]any)
	var out []int
	for k := range responses {
		if n, err := strconv.Atoi(k); err == nil {
			out = append(out, n)
		}
	}
	sort.Ints(out)
	return out
}

// echoTemplate translates an echo route path to the OpenAPI template it is documented as.
func echoTemplate(path string) string {
	if path == "/static/*" {
		return "/static/{path}"
	}
	segs := strings.Split(path, "/")
	for i, s := range segs {
		if name, ok := strings.CutPrefix(s, ":"); ok {
			segs[i] = "{" + name + "}"
		}
	}
	return strings.Join(segs, "/")
}

// routeServer builds a server without a database: routes and rules need none.
func routeServer(t *testing.T) *Server {
	t.Helper()
	cfg, _ := testConfig("postgres://unused")
	s, err := New(cfg, nil, slog.New(slog.NewTextHandler(io.Discard, nil)), time.Now)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func TestOpenAPIMatchesRoutes(t *testing.T) {
	s := routeServer(t)
	d, err := loadAPIDoc()
	if err != nil {
		t.Fatal(err)
	}
	served := map[string]bool{}
	for _, r := range s.echo.Routes() {
		served[r.Method+" "+echoTemplate(r.Path)] = true
	}
	documented := map[string]bool{}
	for _, op := range d.ops {
		documented[op.Method+" "+op.Path] = true
	}
	var problems []string
	for _, k := range slices.Sorted(maps.Keys(served)) {
		if !documented[k] {
			problems = append(problems, "served but not documented: "+k)
		}
	}
	for _, k := range slices.Sorted(maps.Keys(documented)) {
		if !served[k] {
			problems = append(problems, "documented but not served: "+k)
		}
	}
	if len(problems) > 0 {
		t.Errorf("openapi.yaml and routes.go disagree:\n  %s", strings.Join(problems, "\n  "))
	}
	if len(served) < 20 {
		t.Errorf("only %d routes served; the comparison is not looking at the real router", len(served))
	}
}

// TestOpenAPISecurityMatchesRules checks each operation's security, x-roles and
// x-agent-scope against the access rule routes.go gives the route.
func TestOpenAPISecurityMatchesRules(t *testing.T) {
	s := routeServer(t)
	d, err := loadAPIDoc()
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range s.echo.Routes() {
		rl := s.rules[r.Method+" "+r.Path]
		op := d.template(r.Method, echoTemplate(r.Path))
		if op == nil {
			continue // reported by TestOpenAPIMatchesRoutes
		}
		name := r.Method + " " + op.Path
		var schemes []string
		sec, hasSec := op.Op["security"].([]any)
		for _, req := range sec {
			for k := range req.(map[string]any) {
				schemes = append(schemes, k)
			}
		}
		sort.Strings(schemes)
		var roles []string
		if xr, ok := op.Op["x-roles"].([]any); ok {
			for _, v := range xr {
				roles = append(roles, v.(string))
			}
		}
		sort.Strings(roles)
		scope, _ := op.Op["x-agent-scope"].(string)

		var wantSchemes, wantRoles []string
		if !rl.public {
			wantSchemes = []string{"accessToken"}
			if rl.scope != "" {
				wantSchemes = append(wantSchemes, "agentToken")
			}
			for _, role := range rl.roles {
				wantRoles = append(wantRoles, string(role))
			}
			sort.Strings(wantRoles)
		}
		switch {
		case !hasSec:
			t.Errorf("%s: no security given; public operations say security: []", name)
		case !slices.Equal(schemes, wantSchemes):
			t.Errorf("%s: security %v, routes.go wants %v", name, schemes, wantSchemes)
		}
		if !slices.Equal(roles, wantRoles) {
			t.Errorf("%s: x-roles %v, routes.go allows %v", name, roles, wantRoles)
		}
		if scope != string(rl.scope) {
			t.Errorf("%s: x-agent-scope %q, routes.go admits agents with %q", name, scope, rl.scope)
		}
		statuses := op.statuses()
		if !rl.public && (!slices.Contains(statuses, 401) || !slices.Contains(statuses, 403)) {
			t.Errorf("%s needs credentials but does not document both 401 and 403 (has %v)", name, statuses)
		}
	}
}

// TestOpenAPIDocument checks the document is complete and that every schema in it
// compiles under draft 2020-12.
func TestOpenAPIDocument(t *testing.T) {
	d, err := loadAPIDoc()
	if err != nil {
		t.Fatal(err)
	}
	if d.root["openapi"] != "3.1.0" || d.root["jsonSchemaDialect"] != "https://spec.openapis.org/oas/3.1/dialect/base" {
		t.Errorf("openapi %v, jsonSchemaDialect %v", d.root["openapi"], d.root["jsonSchemaDialect"])
	}
	checkRefs(t, d, d.root, "#")
	tags := map[string]bool{}
	for _, tg := range d.root["tags"].([]any) {
		tags[tg.(map[string]any)["name"].(string)] = true
	}
	ids := map[string]string{}
	for _, op := range d.ops {
		name := op.Method + " " + op.Path
		id, _ := op.Op["operationId"].(string)
		if id == "" {
			t.Errorf("%s: no operationId", name)
		} else if other, dup := ids[id]; dup {
			t.Errorf("%s: operationId %s also used by %s", name, id, other)
		}
		ids[id] = name
		for _, k := range []string{"summary", "description"} {
			if s, _ := op.Op[k].(string); strings.TrimSpace(s) == "" {
				t.Errorf("%s: no %s", name, k)
			}
		}
		opTags, _ := op.Op["tags"].([]any)
		if len(opTags) == 0 {
			t.Errorf("%s: no tags", name)
		}
		for _, tg := range opTags {
			if !tags[tg.(string)] {
				t.Errorf("%s: tag %q is not declared", name, tg)
			}
		}
		checkPathParams(t, d, op)
		checkOperationSchemas(t, d, op)
	}
	schemas, _ := d.root["components"].(map[string]any)["schemas"].(map[string]any)
	for _, name := range slices.Sorted(maps.Keys(schemas)) {
		if _, err := d.schema("#/components/schemas/" + name); err != nil {
			t.Errorf("components/schemas/%s: %v", name, err)
		}
	}
}

// checkRefs makes sure every $ref in the document names something that exists.
func checkRefs(t *testing.T, d *apiDoc, v any, at string) {
	switch v := v.(type) {
	case map[string]any:
		if ref, ok := v["$ref"].(string); ok {
			if _, err := d.lookup(ref); err != nil {
				t.Errorf("%s: %v", at, err)
			}
		}
		for k, e := range v {
			checkRefs(t, d, e, at+"/"+escapePointer(k))
		}
	case []any:
		for i, e := range v {
			checkRefs(t, d, e, at+"/"+strconv.Itoa(i))
		}
	}
}

var templateParam = regexp.MustCompile(`\{([^}]+)\}`)

// checkPathParams requires exactly the template's parameters to be declared as path
// parameters, at path or operation level.
func checkPathParams(t *testing.T, d *apiDoc, op *apiOperation) {
	var want []string
	for _, m := range templateParam.FindAllStringSubmatch(op.Path, -1) {
		want = append(want, m[1])
	}
	var got []string
	for _, list := range []any{op.Item["parameters"], op.Op["parameters"]} {
		ps, _ := list.([]any)
		for _, p := range ps {
			pm, _, err := d.resolve(p, op.Pointer+"/parameters")
			if err != nil {
				t.Errorf("%s %s: %v", op.Method, op.Path, err)
				continue
			}
			if pm["in"] == "path" {
				if pm["required"] != true {
					t.Errorf("%s %s: path parameter %v not required", op.Method, op.Path, pm["name"])
				}
				got = append(got, pm["name"].(string))
			}
		}
	}
	sort.Strings(want)
	sort.Strings(got)
	if !slices.Equal(want, got) {
		t.Errorf("%s %s: path parameters declared %v, template has %v", op.Method, op.Path, got, want)
	}
}

// checkOperationSchemas compiles the request and response schemas of op and checks
// the statuses a JSON body implies.
func checkOperationSchemas(t *testing.T, d *apiDoc, op *apiOperation) {
	name := op.Method + " " + op.Path
	statuses := op.statuses()
	if !slices.ContainsFunc(statuses, func(s int) bool { return s/100 == 2 }) {
		t.Errorf("%s: no 2xx response", name)
	}
	if rb, ok := op.Op["requestBody"]; ok {
		body, ptr, err := d.resolve(rb, op.Pointer+"/requestBody")
		if err != nil {
			t.Errorf("%s: %v", name, err)
			return
		}
		content, _ := body["content"].(map[string]any)
		if len(content) == 1 && content["*/*"] != nil {
			// A byte stream (a data file): any media type, no JSON schema to hold.
			for _, s := range []int{400, 413} {
				if !slices.Contains(statuses, s) {
					t.Errorf("%s takes a byte stream but does not document %d", name, s)
				}
			}
		} else {
			checkJSONRequest(t, d, name, statuses, content, ptr)
		}
	}
	for _, status := range statuses {
		resp, ptr, _, err := d.response(op, status)
		if err != nil {
			t.Errorf("%s %d: %v", name, status, err)
			continue
		}
		if s, _ := resp["description"].(string); strings.TrimSpace(s) == "" {
			t.Errorf("%s %d: no description", name, status)
		}
		content, _ := resp["content"].(map[string]any)
		for _, mt := range slices.Sorted(maps.Keys(content)) {
			if _, err := d.schema(ptr + "/content/" + escapePointer(mt) + "/schema"); err != nil {
				t.Errorf("%s %d %s: %v", name, status, mt, err)
			}
		}
		if status >= 400 && !strings.HasPrefix(op.Path, "/static/") {
			errPtr := ptr + "/content/application~1json/schema"
			if _, err := d.lookup(errPtr); err != nil {
				t.Errorf("%s %d: an error answer without an application/json schema", name, status)
			}
		}
	}
}

// TestOpenAPIServed checks GET /api/openapi.json answers exactly the embedded document.
func TestOpenAPIServed(t *testing.T) {
	w := newWorld(t)
	want, err := openapiJSON()
	if err != nil {
		t.Fatal(err)
	}
	r := w.do(http.MethodGet, "/api/openapi.json", "", nil, nil)
	if r.StatusCode != http.StatusOK || !bytes.Equal(r.Body, want) {
		t.Fatalf("GET /api/openapi.json: %d, %d bytes; want 200 and the %d bytes of openapiJSON()", r.StatusCode, len(r.Body), len(want))
	}
	if ct := r.Header.Get("Content-Type"); !strings.HasPrefix(ct, "application/json") {
		t.Errorf("Content-Type %q", ct)
	}
}

// checkJSONRequest checks a JSON request body: one media type, a schema that compiles
// and refuses unknown fields (the server decodes with DisallowUnknownFields), and the
// statuses a JSON body implies.
func checkJSONRequest(t *testing.T, d *apiDoc, name string, statuses []int, content map[string]any, ptr string) {
	t.Helper()
	if len(content) != 1 || content["application/json"] == nil {
		t.Errorf("%s: request body should be application/json only", name)
	}
	sptr := ptr + "/content/application~1json/schema"
	if _, err := d.schema(sptr); err != nil {
		t.Errorf("%s: request schema: %v", name, err)
	}
	if raw, err := d.lookup(sptr); err == nil {
		if sch, _, err := d.resolve(raw, sptr); err == nil && sch["additionalProperties"] != false {
			t.Errorf("%s: request schema does not say additionalProperties: false", name)
		}
	}
	for _, s := range []int{400, 413, 415} {
		if !slices.Contains(statuses, s) {
			t.Errorf("%s takes a JSON body but does not document %d", name, s)
		}
	}
}
