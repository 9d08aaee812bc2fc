package midsag

import (
	"errors"
	"go/ast"
	"go/parser"
	"go/token"
	"os"
	"slices"
	"strings"
	"testing"
)

// declaredReasons returns the names and values of the Reason constants
// declared in reason.go, read from the source so a code added there
// without a place in AllReasons is caught.
func declaredReasons(t *testing.T) map[string]Reason {
	t.Helper()
	f, err := parser.ParseFile(token.NewFileSet(), "reason.go", nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]Reason{}
	for _, d := range f.Decls {
		gd, ok := d.(*ast.GenDecl)
		if !ok || gd.Tok != token.CONST {
			continue
		}
		for _, spec := range gd.Specs {
			vs := spec.(*ast.ValueSpec)
			if id, ok := vs.Type.(*ast.Ident); !ok || id.Name != "Reason" {
				continue
			}
			for i, name := range vs.Names {
				lit, ok := vs.Values[i].(*ast.BasicLit)
				if !ok || lit.Kind != token.STRING {
					t.Fatalf("%s is not a string literal", name.Name)
				}
				out[name.Name] = Reason(lit.Value[1 : len(lit.Value)-1])
			}
		}
	}
	return out
}

func TestAllReasonsListsEveryConstant(t *testing.T) {
	declared := declaredReasons(t)
	all := AllReasons()
	if len(all) != len(declared) {
		t.Errorf("AllReasons has %d codes, reason.go declares %d", len(all), len(declared))
	}
	values := map[Reason]string{}
	for name, v := range declared {
		if other, dup := values[v]; dup {
			t.Errorf("%s and %s share the code %q", name, other, v)
		}
		values[v] = name
		if !slices.Contains(all, v) {
			t.Errorf("%s (%q) is missing from AllReasons", name, v)
		}
	}
}

// TestReadmeListsEveryReason: the README's reason list is the public
// contract's documentation, so every code must appear there in backticks.
func TestReadmeListsEveryReason(t *testing.T) {
	b, err := os.ReadFile("README.md")
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range AllReasons() {
		if !strings.Contains(string(b), "`"+string(r)+"`") {
			t.Errorf("README.md does not list the reason code %q", r)
		}
	}
}

// TestReasonWireStrings pins the codes named in docs/ARCHITECTURE.md's contract and
// the README: they are a public vocabulary and must not change.
func TestReasonWireStrings(t *testing.T) {
	want := map[Reason]string{
		ReasonNotDICOM: "not_dicom", ReasonTruncated: "truncated", ReasonTooLarge: "too_large",
		ReasonUnsupportedSyntax: "unsupported_transfer_syntax", ReasonNoSagittalT2: "no_sagittal_t2_series",
		ReasonTooFewSlices: "too_few_slices", ReasonInconsistentGeometry: "inconsistent_geometry",
		ReasonModelInputMismatch: "model_input_mismatch", ReasonOverloaded: "overloaded",
		ReasonBadTable: "bad_table", ReasonError: "error", ReasonUnreadable: "unreadable",
		ReasonNotFound: "not_found", ReasonUnauthenticated: "unauthenticated",
		ReasonBadRequest: "bad_request", ReasonInternal: "internal",
		ReasonMixedModels: "mixed_models", ReasonOverlappingStudies: "overlapping_studies",
	}
	for r, s := range want {
		if string(r) != s {
			t.Errorf("code %q, want %q", r, s)
		}
	}
}

func TestErrorMessageAndDetails(t *testing.T) {
	cause := errors.New("unexpected EOF")
	e := Reject(ReasonTruncated, "pixel data ends early", cause)
	if got, want := e.Error(), "truncated: pixel data ends early: unexpected EOF"; got != want {
		t.Errorf("Error() = %q, want %q", got, want)
	}
	if got, want := e.Message(), "pixel data ends early: unexpected EOF"; got != want {
		t.Errorf("Message() = %q, want %q", got, want)
	}
	d := e.WithDetail("source", "a.dcm")
	if e.Details != nil {
		t.Errorf("WithDetail changed the original: %v", e.Details)
	}
	if d.Details["source"] != "a.dcm" || !errors.Is(d, cause) {
		t.Errorf("copy %v lost its detail or cause", d)
	}
	if r, ok := ReasonOf(errors.Join(errors.New("x"), d)); !ok || r != ReasonTruncated {
		t.Errorf("ReasonOf = %q, %v", r, ok)
	}
}
