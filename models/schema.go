package models

import (
	_ "embed"
	"encoding/json"
	"fmt"
	"math"
	"sort"
	"strings"
)

// ManifestJSONSchema is the JSON Schema (draft 2020-12) of the manifest,
// committed as models/manifest.schema.json and documented field by field
// in docs/MANIFEST.md. ParseManifest validates against it and fills its
// defaults before the cross-field checks of Manifest.Validate.
//
//go:embed manifest.schema.json
var ManifestJSONSchema []byte

// schemaNode is the part of JSON Schema the manifest schema uses. The
// keywords are those of JSON Schema 2020-12 Validation (json-schema.org,
// draft 2020-12, sections 6.1-6.5); decoding refuses any other keyword so
// that the schema never says more than this validator checks.
type schemaNode struct {
	Schema               string                 `json:"$schema"`
	ID                   string                 `json:"$id"`
	Title                string                 `json:"title"`
	Description          string                 `json:"description"`
	Type                 string                 `json:"type"`
	Const                any                    `json:"const"`
	Enum                 []any                  `json:"enum"`
	Default              any                    `json:"default"`
	Examples             []any                  `json:"examples"`
	Properties           map[string]*schemaNode `json:"properties"`
	Required             []string               `json:"required"`
	AdditionalProperties *bool                  `json:"additionalProperties"`
	Items                *schemaNode            `json:"items"`
	MinItems             *int                   `json:"minItems"`
	MaxItems             *int                   `json:"maxItems"`
	MinLength            *int                   `json:"minLength"`
	Minimum              *float64               `json:"minimum"`
	Maximum              *float64               `json:"maximum"`
	ExclusiveMinimum     *float64               `json:"exclusiveMinimum"`
	ExclusiveMaximum     *float64               `json:"exclusiveMaximum"`
}

// manifestSchema is ManifestJSONSchema decoded once.
var manifestSchema = mustSchema(ManifestJSONSchema)

func mustSchema(b []byte) *schemaNode {
	s, err := decodeSchema(b)
	if err != nil {
		panic("models: manifest.schema.json: " + err.Error())
	}
	return s
}

func decodeSchema(b []byte) (*schemaNode, error) {
	dec := json.NewDecoder(strings.NewReader(string(b)))
	dec.DisallowUnknownFields()
	var s schemaNode
	if err := dec.Decode(&s); err != nil {
		return nil, err
	}
	return &s, nil
}

// check validates v (decoded with UseNumber) against s at path, filling
// the defaults of absent properties into objects, and returns the first
// problem with the field's path, what was wrong and what is allowed.
func (s *schemaNode) check(path string, v any) error {
	if s.Const != nil && v != s.Const {
		return badManifest("%s is %s, want %s", path, show(v), show(s.Const))
	}
	if s.Enum != nil {
		return s.checkEnum(path, v)
	}
	switch s.Type {
	case "object":
		return s.checkObject(path, v)
	case "array":
		return s.checkArray(path, v)
	case "string":
		str, ok := v.(string)
		if !ok {
			return badManifest("%s is %s, want a string (%s)", path, show(v), s.Description)
		}
		if s.MinLength != nil && len(str) < *s.MinLength {
			return badManifest("%s is empty, want %s", path, s.Description)
		}
	case "integer", "number":
		return s.checkNumber(path, v)
	}
	return nil
}

func (s *schemaNode) checkEnum(path string, v any) error {
	for _, e := range s.Enum {
		if v == e {
			return nil
		}
	}
	names := make([]string, len(s.Enum))
	for i, e := range s.Enum {
		names[i] = show(e)
	}
	return badManifest("%s is %s, want one of %s (%s)", path, show(v), strings.Join(names, ", "), s.Description)
}

func (s *schemaNode) checkObject(path string, v any) error {
	obj, ok := v.(map[string]any)
	if !ok {
		return badManifest("%s is %s, want an object", orRoot(path), show(v))
	}
	keys := make([]string, 0, len(obj))
	for k := range obj {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		p, ok := s.Properties[k]
		if !ok {
			return badManifest("%s: unknown field %q; %s allows %s (docs/MANIFEST.md)", orRoot(path), k, orRoot(path), s.fieldNames())
		}
		if err := p.check(join(path, k), obj[k]); err != nil {
			return err
		}
	}
	for _, k := range s.Required {
		if _, ok := obj[k]; !ok {
			p := s.Properties[k]
			return badManifest("%s is required: %s", join(path, k), p.Description)
		}
	}
	for k, p := range s.Properties {
		if _, ok := obj[k]; !ok && p.Default != nil {
			obj[k] = p.Default
		}
	}
	return nil
}

func (s *schemaNode) checkArray(path string, v any) error {
	arr, ok := v.([]any)
	if !ok {
		return badManifest("%s is %s, want an array (%s)", path, show(v), s.Description)
	}
	if (s.MinItems != nil && len(arr) < *s.MinItems) || (s.MaxItems != nil && len(arr) > *s.MaxItems) {
		return badManifest("%s has %d items, want %s (%s)", path, len(arr), itemRange(s.MinItems, s.MaxItems), s.Description)
	}
	for i, x := range arr {
		if err := s.Items.check(fmt.Sprintf("%s[%d]", path, i), x); err != nil {
			return err
		}
	}
	return nil
}

func (s *schemaNode) checkNumber(path string, v any) error {
	n, ok := v.(json.Number)
	if !ok {
		return badManifest("%s is %s, want a number (%s)", path, show(v), s.Description)
	}
	f, err := n.Float64()
	if err != nil || math.IsInf(f, 0) {
		return badManifest("%s is %s, want a finite number", path, n)
	}
	if s.Type == "integer" && f != math.Trunc(f) {
		return badManifest("%s is %s, want an integer (%s)", path, n, s.Description)
	}
	switch {
	case s.Minimum != nil && f < *s.Minimum,
		s.Maximum != nil && f > *s.Maximum,
		s.ExclusiveMinimum != nil && f <= *s.ExclusiveMinimum,
		s.ExclusiveMaximum != nil && f >= *s.ExclusiveMaximum:
		return badManifest("%s is %s, want %s (%s)", path, n, s.numberRange(), s.Description)
	}
	return nil
}

// numberRange says the allowed range in words: "1 <= x <= 4096".
func (s *schemaNode) numberRange() string {
	var lo, hi string
	if s.Minimum != nil {
		lo = fmt.Sprintf("%g <= ", *s.Minimum)
	}
	if s.ExclusiveMinimum != nil {
		lo = fmt.Sprintf("%g < ", *s.ExclusiveMinimum)
	}
	if s.Maximum != nil {
		hi = fmt.Sprintf(" <= %g", *s.Maximum)
	}
	if s.ExclusiveMaximum != nil {
		hi = fmt.Sprintf(" < %g", *s.ExclusiveMaximum)
	}
	return lo + "x" + hi
}

func itemRange(lo, hi *int) string {
	switch {
	case lo != nil && hi != nil && *lo == *hi:
		return fmt.Sprint(*lo)
	case lo != nil && hi != nil:
		return fmt.Sprintf("%d to %d", *lo, *hi)
	case lo != nil:
		return fmt.Sprintf("at least %d", *lo)
	default:
		return fmt.Sprintf("at most %d", *hi)
	}
}

// fieldNames lists the object's allowed fields, required ones first.
func (s *schemaNode) fieldNames() string {
	names := make([]string, 0, len(s.Properties))
	req := map[string]bool{}
	for _, k := range s.Required {
		req[k] = true
		names = append(names, k+" (required)")
	}
	var opt []string
	for k := range s.Properties {
		if !req[k] {
			opt = append(opt, k)
		}
	}
	sort.Strings(opt)
	return strings.Join(append(names, opt...), ", ")
}

// show renders a JSON value for an error.
func show(v any) string {
	b, err := json.Marshal(v)
	if err != nil {
		return fmt.Sprint(v)
	}
	return string(b)
}

func join(path, k string) string {
	if path == "" {
		return k
	}
	return path + "." + k
}

func orRoot(path string) string {
	if path == "" {
		return "the manifest"
	}
	return path
}
