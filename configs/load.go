// Package configs holds the sample configuration files of hystd (embedded in
// the binary, so the demo needs no files on disk) and the strict YAML loader
// that every configuration kind uses.
//
// Strict means: unknown keys, wrong types and missing or out-of-range values
// are errors that name the file, the line, the key and the problem, as
// "FILE:LINE: key: problem". Durations are strings with a unit ("500ms").
package configs

import (
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"path"
	"reflect"
	"regexp"
	"sort"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// Samples holds every sample config shipped in this folder.
//
//go:embed *.yaml instruments/*.yaml recipes/*.yaml calibrations/*.yaml
var Samples embed.FS

// Error is one configuration problem at a place in a file.
type Error struct {
	File    string
	Line    int // 0 when unknown
	Key     string
	Problem string
}

func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	b.WriteString(": ")
	if e.Key != "" {
		b.WriteString(e.Key)
		b.WriteString(": ")
	}
	b.WriteString(e.Problem)
	return b.String()
}

// Errors is a list of problems found in one pass; it is an error itself.
type Errors []*Error

func (es Errors) Error() string {
	lines := make([]string, len(es))
	for i, e := range es {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap lets errors.As find each *Error.
func (es Errors) Unwrap() []error {
	out := make([]error, len(es))
	for i, e := range es {
		out[i] = e
	}
	return out
}

// Err returns nil for an empty list, the list otherwise.
func (es Errors) Err() error {
	if len(es) == 0 {
		return nil
	}
	return es
}

// Doc is a parsed YAML document that remembers where each key is.
type Doc struct {
	File string
	root *yaml.Node // mapping node of the document
}

// Parse parses one YAML document. file is used in error messages only.
func Parse(file string, data []byte) (*Doc, error) {
	var n yaml.Node
	if err := yaml.Unmarshal(data, &n); err != nil {
		return nil, &Error{File: file, Line: yamlLine(err.Error()), Problem: cleanYAML(err.Error())}
	}
	if len(n.Content) == 0 {
		return nil, &Error{File: file, Problem: "empty document"}
	}
	root := n.Content[0]
	if root.Kind != yaml.MappingNode {
		return nil, &Error{File: file, Line: root.Line, Problem: "the document must be a mapping of keys to values"}
	}
	return &Doc{File: file, root: root}, nil
}

// Kind returns the value of the top-level "kind" key, or "".
func (d *Doc) Kind() string {
	if n := d.node("kind"); n != nil && n.Kind == yaml.ScalarNode {
		return n.Value
	}
	return ""
}

// Decode decodes the document into v (a pointer to a struct with yaml tags)
// strictly: every key of the document must be a field of v, and every value
// must have the field's type. All problems found are returned as Errors.
func (d *Doc) Decode(v any) error {
	var es Errors
	d.checkKeys(d.root, reflect.TypeOf(v), "", &es)
	if len(es) > 0 {
		return es
	}
	if err := d.root.Decode(v); err != nil {
		var te *yaml.TypeError
		if errors.As(err, &te) {
			for _, m := range te.Errors {
				line := yamlLine(m)
				es = append(es, &Error{File: d.File, Line: line, Key: d.keyAt(line, quotedValue(m)), Problem: cleanYAML(m)})
			}
			return es
		}
		var fe *fieldError
		if errors.As(err, &fe) {
			return &Error{File: d.File, Line: fe.line, Key: d.keyAt(fe.line, fe.value), Problem: fe.msg}
		}
		return &Error{File: d.File, Problem: cleanYAML(err.Error())}
	}
	return nil
}

// Errorf builds an Error for the key at path (dotted, list items by index,
// e.g. "steps.2.amplitude"), with the line where that key is, or the line of
// its nearest parent that exists.
func (d *Doc) Errorf(path, format string, args ...any) *Error {
	return &Error{File: d.File, Line: d.Line(path), Key: path, Problem: fmt.Sprintf(format, args...)}
}

// Line returns the line of the key at path, or of its nearest existing parent.
func (d *Doc) Line(path string) int {
	parts := strings.Split(path, ".")
	for len(parts) > 0 {
		if n, k := d.lookup(parts); n != nil {
			if k != nil {
				return k.Line
			}
			return n.Line
		}
		parts = parts[:len(parts)-1]
	}
	return d.root.Line
}

// Items returns the number of items of the list at path and the line of
// its key; 0, 0 when there is no list there. It looks at the parsed document
// only, so a caller can refuse an oversized list before decoding it.
func (d *Doc) Items(path string) (n, line int) {
	v, k := d.lookup(strings.Split(path, "."))
	if v == nil || v.Kind != yaml.SequenceNode {
		return 0, 0
	}
	line = v.Line
	if k != nil {
		line = k.Line
	}
	return len(v.Content), line
}

func (d *Doc) node(path string) *yaml.Node {
	n, _ := d.lookup(strings.Split(path, "."))
	return n
}

// lookup returns the value node at the path and the key node naming it.
func (d *Doc) lookup(parts []string) (val, key *yaml.Node) {
	n := d.root
	for _, p := range parts {
		switch n.Kind {
		case yaml.MappingNode:
			found := false
			for i := 0; i+1 < len(n.Content); i += 2 {
				if n.Content[i].Value == p {
					key, n = n.Content[i], n.Content[i+1]
					found = true
					break
				}
			}
			if !found {
				return nil, nil
			}
		case yaml.SequenceNode:
			i, err := strconv.Atoi(p)
			if err != nil || i < 0 || i >= len(n.Content) {
				return nil, nil
			}
			key, n = nil, n.Content[i]
		default:
			return nil, nil
		}
	}
	return n, key
}

// keyAt finds the dotted path of the key or item on line; when several keys
// share the line (a flow mapping such as {a: 1, b: 2}), the one whose value
// is value wins.
func (d *Doc) keyAt(line int, value string) string {
	var best, exact string
	var walk func(n *yaml.Node, path string)
	walk = func(n *yaml.Node, path string) {
		switch n.Kind {
		case yaml.MappingNode:
			for i := 0; i+1 < len(n.Content); i += 2 {
				k, v := n.Content[i], n.Content[i+1]
				p := join(path, k.Value)
				if k.Line == line || v.Line == line {
					best = p
					if value != "" && v.Kind == yaml.ScalarNode && v.Value == value && exact == "" {
						exact = p
					}
				}
				walk(v, p)
			}
		case yaml.SequenceNode:
			for i, c := range n.Content {
				p := join(path, strconv.Itoa(i))
				if c.Line == line && best == "" {
					best = p
				}
				walk(c, p)
			}
		}
	}
	walk(d.root, "")
	if exact != "" {
		return exact
	}
	return best
}

var quotedRE = regexp.MustCompile("`([^`]*)`")

// quotedValue returns the value a yaml type error quotes, e.g. "many" in
// "cannot unmarshal !!str `many` into int".
func quotedValue(msg string) string {
	if m := quotedRE.FindStringSubmatch(msg); m != nil {
		return m[1]
	}
	return ""
}

func join(path, k string) string {
	if path == "" {
		return k
	}
	return path + "." + k
}

var unmarshalerType = reflect.TypeOf((*yaml.Unmarshaler)(nil)).Elem()

// checkKeys reports every mapping key that has no field in t.
func (d *Doc) checkKeys(n *yaml.Node, t reflect.Type, path string, es *Errors) {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if reflect.PointerTo(t).Implements(unmarshalerType) {
		return
	}
	switch t.Kind() {
	case reflect.Struct:
		if n.Kind != yaml.MappingNode {
			return // the decoder reports the wrong type
		}
		fields := yamlFields(t)
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			ft, ok := fields[k.Value]
			if !ok {
				*es = append(*es, &Error{File: d.File, Line: k.Line, Key: join(path, k.Value),
					Problem: "unknown key" + suggest(k.Value, fields)})
				continue
			}
			d.checkKeys(v, ft, join(path, k.Value), es)
		}
		seen := map[string]int{}
		for i := 0; i+1 < len(n.Content); i += 2 {
			k := n.Content[i]
			if l, dup := seen[k.Value]; dup {
				*es = append(*es, &Error{File: d.File, Line: k.Line, Key: join(path, k.Value),
					Problem: fmt.Sprintf("given twice (first on line %d)", l)})
			}
			seen[k.Value] = k.Line
		}
	case reflect.Slice, reflect.Array:
		if n.Kind == yaml.SequenceNode {
			for i, c := range n.Content {
				d.checkKeys(c, t.Elem(), join(path, strconv.Itoa(i)), es)
			}
		}
	case reflect.Map:
		if n.Kind == yaml.MappingNode {
			for i := 0; i+1 < len(n.Content); i += 2 {
				d.checkKeys(n.Content[i+1], t.Elem(), join(path, n.Content[i].Value), es)
			}
		}
	}
}

// yamlFields maps the yaml key of each exported field (inline fields
// flattened) to its type.
func yamlFields(t reflect.Type) map[string]reflect.Type {
	out := map[string]reflect.Type{}
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		if !f.IsExported() {
			continue
		}
		tag := f.Tag.Get("yaml")
		name, opts, _ := strings.Cut(tag, ",")
		if name == "-" {
			continue
		}
		if strings.Contains(opts, "inline") {
			ft := f.Type
			for ft.Kind() == reflect.Pointer {
				ft = ft.Elem()
			}
			for k, v := range yamlFields(ft) {
				out[k] = v
			}
			continue
		}
		if name == "" {
			name = strings.ToLower(f.Name)
		}
		out[name] = f.Type
	}
	return out
}

// suggest names the closest known key when the given one looks misspelled.
func suggest(k string, fields map[string]reflect.Type) string {
	names := make([]string, 0, len(fields))
	for n := range fields {
		names = append(names, n)
	}
	sort.Strings(names)
	best, bestD := "", 3
	for _, n := range names {
		if dd := editDistance(k, n); dd < bestD {
			best, bestD = n, dd
		}
	}
	if best != "" {
		return fmt.Sprintf(" (did you mean %q?)", best)
	}
	return fmt.Sprintf(" (known keys: %s)", strings.Join(names, ", "))
}

func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur := make([]int, len(b)+1)
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			c := 1
			if a[i-1] == b[j-1] {
				c = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+c)
		}
		prev = cur
	}
	return prev[len(b)]
}

var lineRE = regexp.MustCompile(`line (\d+)`)

func yamlLine(msg string) int {
	if m := lineRE.FindStringSubmatch(msg); m != nil {
		n, _ := strconv.Atoi(m[1])
		return n
	}
	return 0
}

var linePrefixRE = regexp.MustCompile(`^(yaml: )?(unmarshal errors:\s*)?(line \d+: )?`)

func cleanYAML(msg string) string {
	msg = strings.TrimSpace(linePrefixRE.ReplaceAllString(strings.TrimSpace(msg), ""))
	msg = strings.ReplaceAll(msg, "!!str", "text")
	msg = strings.ReplaceAll(msg, "!!int", "integer")
	msg = strings.ReplaceAll(msg, "!!float", "number")
	msg = strings.ReplaceAll(msg, "!!map", "mapping")
	msg = strings.ReplaceAll(msg, "!!seq", "list")
	return msg
}

// fieldError is returned by UnmarshalYAML methods of config value types.
type fieldError struct {
	line  int
	value string
	msg   string
}

func (e *fieldError) Error() string { return fmt.Sprintf("line %d: %s", e.line, e.msg) }

// ValueError is what a config value type's UnmarshalYAML returns for a bad
// value; Decode turns it into an Error with file, line and key.
func ValueError(n *yaml.Node, format string, args ...any) error {
	return &fieldError{line: n.Line, value: n.Value, msg: fmt.Sprintf(format, args...)}
}

// Duration is a time span written as a string with a unit ("500ms", "2m").
// A bare number is an error: "5" could mean seconds or nanoseconds.
type Duration time.Duration

// UnmarshalYAML implements yaml.Unmarshaler.
func (d *Duration) UnmarshalYAML(n *yaml.Node) error {
	if n.Kind != yaml.ScalarNode {
		return ValueError(n, "want a duration such as \"500ms\"")
	}
	if n.Tag != "!!str" {
		return ValueError(n, "duration %q has no unit; write it as a string with a unit, e.g. \"%sms\" or \"%ss\"", n.Value, n.Value, n.Value)
	}
	v, err := time.ParseDuration(n.Value)
	if err != nil {
		return ValueError(n, "not a duration: %q (use a unit: ms, s, m, h)", n.Value)
	}
	*d = Duration(v)
	return nil
}

// MarshalYAML implements yaml.Marshaler.
func (d Duration) MarshalYAML() (any, error) { return time.Duration(d).String(), nil }

// D returns the value as a time.Duration.
func (d Duration) D() time.Duration { return time.Duration(d) }

// ParseKindDir parses every *.yaml and *.yml file directly in dir of fsys
// and returns, in name order, the documents whose `kind:` is kind (files of
// other kinds are skipped). shown is the folder as errors name it. A file
// that cannot be read or parsed ends the listing with its error.
func ParseKindDir(fsys fs.FS, dir, shown, kind string) ([]*Doc, error) {
	entries, err := fs.ReadDir(fsys, dir)
	if err != nil {
		return nil, err
	}
	var docs []*Doc
	for _, e := range entries {
		n := e.Name()
		if e.IsDir() || !(strings.HasSuffix(n, ".yaml") || strings.HasSuffix(n, ".yml")) {
			continue
		}
		data, err := fs.ReadFile(fsys, path.Join(dir, n))
		if err != nil {
			return nil, err
		}
		doc, err := Parse(path.Join(shown, n), data)
		if err != nil {
			return nil, err
		}
		if doc.Kind() == kind {
			docs = append(docs, doc)
		}
	}
	return docs, nil
}
