package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
)

// The test model and its op counts come from models/testdata (written by
// make_models.py with PyTorch; counts as the onnx Python package reported).
const testModel = "../../models/testdata/tiny_logit.onnx"

func TestModelInspectJSON(t *testing.T) {
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"model", "inspect", "--json", testModel}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errb.String())
	}
	var ins models.Inspection
	if err := json.Unmarshal(out.Bytes(), &ins); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out.String())
	}
	// reference.json: onnx.load(...).graph.node holds one Conv, Relu,
	// GlobalAveragePool, Flatten and Gemm.
	for _, op := range []string{"Conv", "Relu", "GlobalAveragePool", "Flatten", "Gemm"} {
		if ins.OpCounts[op] != 1 {
			t.Errorf("%s count %d, want 1", op, ins.OpCounts[op])
		}
	}
	if ins.Manifest == nil || ins.Manifest.Name != "tiny_logit" || ins.Notice != midsag.Notice || len(ins.SHA256) != 64 {
		t.Errorf("inspection %+v", ins)
	}
	if ins.Runtime == nil {
		t.Error("no runtime check recorded")
	} else if ins.Runtime.Library != "" && !ins.Runtime.OK {
		t.Errorf("onnxruntime check failed: %s", ins.Runtime.Error)
	} else if ins.Runtime.Library == "" && os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
		t.Errorf("ONNX Runtime required: %s", ins.Runtime.Error)
	}
}

func TestModelInspectHuman(t *testing.T) {
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"model", "inspect", testModel}, &out, &errb); code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errb.String())
	}
	for _, s := range []string{"sha256", "temperature (T=1.7)", "Conv x1", midsag.Notice} {
		if !strings.Contains(out.String(), s) {
			t.Errorf("output lacks %q:\n%s", s, out.String())
		}
	}
}

func TestModelInspectUsage(t *testing.T) {
	for _, args := range [][]string{{"model"}, {"model", "frob"}, {"model", "inspect"}} {
		var out, errb bytes.Buffer
		if code := run(context.Background(), args, &out, &errb); code != exitUsage {
			t.Errorf("%q: exit %d, want %d", args, code, exitUsage)
		}
	}
	// fixed224.onnx takes [1,1,224,224] while its manifest asks for 3x32x32
	// (make_models.py), so ONNX Runtime's check refuses it.
	if _, err := models.FindLibrary(""); err == nil {
		var out, errb bytes.Buffer
		code := run(context.Background(), []string{"model", "inspect", "../../models/testdata/fixed224.onnx"}, &out, &errb)
		if code != exitRejected || !strings.Contains(errb.String(), string(midsag.ReasonModelInputMismatch)) {
			t.Errorf("mismatched model: exit %d, stderr %q; want %d and %s", code, errb.String(), exitRejected, midsag.ReasonModelInputMismatch)
		}
	}
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"model", "inspect", "missing.onnx"}, &out, &errb); code != exitRuntime {
		t.Errorf("missing file: exit %d, want %d", code, exitRuntime)
	}
}
