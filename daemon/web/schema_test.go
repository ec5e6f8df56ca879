package web_test

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
)

// schemaChecker checks JSON values against the subset of JSON Schema that
// openapi.json uses: $ref (to #/components/…), allOf, oneOf, type (a name
// or a list of names, "null" included), nullable, enum, required,
// properties, additionalProperties and items. Other keywords are
// annotations (description, format, default, minimum, maximum), which it
// ignores; any keyword it does not know is an error, so that the document
// cannot grow a rule that goes unchecked.
//
// An object whose schema declares properties may carry no others, unless
// additionalProperties allows them: the document must describe every
// member an answer has.
type schemaChecker struct {
	doc map[string]any
}

var (
	checkedKeywords    = []string{"$ref", "allOf", "oneOf", "type", "nullable", "enum", "required", "properties", "additionalProperties", "items"}
	annotationKeywords = []string{"description", "format", "default", "minimum", "maximum", "title", "example"}
)

// resolve follows a $ref.
func (c *schemaChecker) resolve(ref string) (map[string]any, error) {
	if !strings.HasPrefix(ref, "#/") {
		return nil, fmt.Errorf("$ref %q: only references inside the document are supported", ref)
	}
	var node any = c.doc
	for _, part := range strings.Split(strings.TrimPrefix(ref, "#/"), "/") {
		m, ok := node.(map[string]any)
		if !ok {
			return nil, fmt.Errorf("$ref %q does not resolve", ref)
		}
		node = m[part]
	}
	m, ok := node.(map[string]any)
	if !ok {
		return nil, fmt.Errorf("$ref %q does not resolve", ref)
	}
	return m, nil
}

// keywords reports keywords the checker does not know.
func keywords(schema map[string]any) error {
	for k := range schema {
		if !slices.Contains(checkedKeywords, k) && !slices.Contains(annotationKeywords, k) {
			return fmt.Errorf("schema keyword %q is not supported by the test's checker", k)
		}
	}
	return nil
}

// check returns the problems of v against schema, each prefixed with its
// JSON path.
func (c *schemaChecker) check(path string, schema map[string]any, v any) []string {
	return c.checkOpt(path, schema, v, true)
}

func (c *schemaChecker) checkOpt(path string, schema map[string]any, v any, closed bool) []string {
	if err := keywords(schema); err != nil {
		return []string{path + ": " + err.Error()}
	}
	var out []string
	if ref, ok := schema["$ref"].(string); ok {
		target, err := c.resolve(ref)
		if err != nil {
			return []string{path + ": " + err.Error()}
		}
		return c.checkOpt(path, target, v, closed)
	}
	if v == nil && schema["nullable"] == true {
		return nil
	}
	if all, ok := schema["allOf"].([]any); ok {
		for _, s := range all {
			out = append(out, c.checkOpt(path, s.(map[string]any), v, false)...)
		}
	}
	if one, ok := schema["oneOf"].([]any); ok {
		pass := 0
		var why []string
		for _, s := range one {
			p := c.checkOpt(path, s.(map[string]any), v, true)
			if len(p) == 0 {
				pass++
			} else {
				why = append(why, p...)
			}
		}
		if pass != 1 {
			out = append(out, fmt.Sprintf("%s: matches %d of the oneOf schemas, want 1 (%s)", path, pass, strings.Join(why, "; ")))
		}
	}
	if t, ok := schema["type"]; ok {
		var types []string
		switch t := t.(type) {
		case string:
			types = []string{t}
		case []any:
			for _, x := range t {
				types = append(types, x.(string))
			}
		}
		if !slices.ContainsFunc(types, func(t string) bool { return isType(t, v) }) {
			return append(out, fmt.Sprintf("%s: %s is not of type %v", path, describe(v), types))
		}
	}
	if enum, ok := schema["enum"].([]any); ok && !slices.Contains(enum, v) {
		out = append(out, fmt.Sprintf("%s: %v is not one of %v", path, v, enum))
	}
	switch v := v.(type) {
	case map[string]any:
		for _, r := range asStrings(schema["required"]) {
			if _, ok := v[r]; !ok {
				out = append(out, fmt.Sprintf("%s: required property %q is missing", path, r))
			}
		}
		props, _ := schema["properties"].(map[string]any)
		for k, s := range props {
			if x, ok := v[k]; ok {
				out = append(out, c.checkOpt(path+"."+k, s.(map[string]any), x, true)...)
			}
		}
		switch ap := schema["additionalProperties"].(type) {
		case map[string]any:
			for k, x := range v {
				if _, declared := props[k]; !declared {
					out = append(out, c.checkOpt(path+"."+k, ap, x, true)...)
				}
			}
		}
		if closed {
			declared, open := c.declared(schema)
			if !open && len(declared) > 0 {
				var extra []string
				for k := range v {
					if !declared[k] {
						extra = append(extra, k)
					}
				}
				sort.Strings(extra)
				if len(extra) > 0 {
					out = append(out, fmt.Sprintf("%s: members %v are not in the schema", path, extra))
				}
			}
		}
	case []any:
		if items, ok := schema["items"].(map[string]any); ok {
			for i, x := range v {
				out = append(out, c.checkOpt(fmt.Sprintf("%s[%d]", path, i), items, x, true)...)
			}
		}
	}
	return out
}

// declared collects the properties a schema declares, through $ref and
// allOf; open is true when additionalProperties allows others.
func (c *schemaChecker) declared(schema map[string]any) (map[string]bool, bool) {
	out := map[string]bool{}
	open := false
	var walk func(s map[string]any)
	walk = func(s map[string]any) {
		if ref, ok := s["$ref"].(string); ok {
			if t, err := c.resolve(ref); err == nil {
				walk(t)
			}
			return
		}
		for k := range asMap(s["properties"]) {
			out[k] = true
		}
		if ap, ok := s["additionalProperties"]; ok && ap != false {
			open = true
		}
		for _, x := range asSlice(s["allOf"]) {
			walk(x.(map[string]any))
		}
	}
	walk(schema)
	return out, open
}

func isType(t string, v any) bool {
	switch t {
	case "null":
		return v == nil
	case "object":
		_, ok := v.(map[string]any)
		return ok
	case "array":
		_, ok := v.([]any)
		return ok
	case "string":
		_, ok := v.(string)
		return ok
	case "boolean":
		_, ok := v.(bool)
		return ok
	case "number":
		_, ok := v.(float64)
		return ok
	case "integer":
		f, ok := v.(float64)
		return ok && f == math.Trunc(f)
	}
	return false
}

func describe(v any) string {
	switch v := v.(type) {
	case nil:
		return "null"
	case map[string]any:
		return "an object"
	case []any:
		return "an array"
	case string:
		return fmt.Sprintf("%q", v)
	}
	return fmt.Sprint(v)
}

func asStrings(v any) []string {
	var out []string
	for _, x := range asSlice(v) {
		if s, ok := x.(string); ok {
			out = append(out, s)
		}
	}
	return out
}

func asSlice(v any) []any {
	s, _ := v.([]any)
	return s
}

func asMap(v any) map[string]any {
	m, _ := v.(map[string]any)
	return m
}
