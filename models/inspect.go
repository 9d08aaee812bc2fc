package models

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"strings"
	"time"

	"github.com/midsag/midsag"
)

// Opset is one entry of a model's opset_import: an operator domain ("" is
// the default ai.onnx domain) and its version.
type Opset struct {
	Domain  string `json:"domain"`
	Version int64  `json:"version"`
}

// MetadataEntry is one metadata_props entry of a model.
type MetadataEntry struct {
	Key   string `json:"key"`
	Value string `json:"value"`
}

// TensorInfo is a graph input or output as the model file declares it.
type TensorInfo struct {
	Name string `json:"name"`
	// ElemType is the element type ("float32", "int64", ...).
	ElemType string `json:"elem_type"`
	// Shape holds each dimension as a number, a symbolic name, or "?".
	Shape []string `json:"shape"`
}

// Inspection is what Inspect reports about a model file.
type Inspection struct {
	Path            string         `json:"path"`
	SHA256          string         `json:"sha256"`
	SizeBytes       int64          `json:"size_bytes"`
	IRVersion       int64          `json:"ir_version"`
	ProducerName    string         `json:"producer_name"`
	ProducerVersion string         `json:"producer_version"`
	Opsets          []Opset        `json:"opset_import"`
	Nodes           int            `json:"nodes"`
	OpCounts        map[string]int `json:"op_counts"`
	Inputs          []TensorInfo   `json:"inputs"`
	Outputs         []TensorInfo   `json:"outputs"`
	MetadataKeys    []string       `json:"metadata_keys"`
	// Manifest is the manifest in effect (sidecar, else embedded), or nil
	// with ManifestError saying why.
	Manifest       *Manifest `json:"manifest,omitempty"`
	ManifestSource string    `json:"manifest_source,omitempty"`
	ManifestError  string    `json:"manifest_error,omitempty"`
	// InitCommand, set when the model has no manifest at all, is the
	// "midsag model init" command that writes one.
	InitCommand string `json:"init_command,omitempty"`
	// Runtime is filled by CheckRuntime.
	Runtime *RuntimeCheck `json:"runtime,omitempty"`
	Notice  string        `json:"notice"`
}

// RuntimeCheck records whether ONNX Runtime loads the model and accepts it
// against its manifest.
type RuntimeCheck struct {
	Library string  `json:"library,omitempty"`
	OK      bool    `json:"ok"`
	Error   string  `json:"error,omitempty"`
	LoadMS  float64 `json:"load_ms,omitempty"`
}

// Inspect reads a model file and its manifest without running it; it needs
// no ONNX Runtime. A missing or invalid manifest is reported in the
// Inspection, not as an error, so the rest of the file can still be seen.
func Inspect(path string) (*Inspection, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("inspect model: %w", err)
	}
	pm, err := parseModel(data)
	if err != nil {
		return nil, fmt.Errorf("inspect %s: %w", path, err)
	}
	sum := sha256.Sum256(data)
	ins := &Inspection{
		Path:            path,
		SHA256:          hex.EncodeToString(sum[:]),
		SizeBytes:       int64(len(data)),
		IRVersion:       pm.irVersion,
		ProducerName:    pm.producerName,
		ProducerVersion: pm.producerVersion,
		Opsets:          pm.opsets,
		Nodes:           pm.nodes,
		OpCounts:        pm.opCounts,
		MetadataKeys:    []string{},
		Notice:          midsag.Notice,
	}
	for _, v := range pm.inputs {
		ins.Inputs = append(ins.Inputs, TensorInfo{Name: v.name, ElemType: v.elemType, Shape: v.dims})
	}
	for _, v := range pm.outputs {
		ins.Outputs = append(ins.Outputs, TensorInfo{Name: v.name, ElemType: v.elemType, Shape: v.dims})
	}
	for _, e := range pm.metadata {
		ins.MetadataKeys = append(ins.MetadataKeys, e.Key)
	}
	sidecar, err := readSidecar(path)
	if err != nil {
		ins.ManifestError = err.Error()
		return ins, nil
	}
	var man *Manifest
	if sidecar != nil {
		ins.ManifestSource = "sidecar " + SidecarPath(path)
		man, err = ParseManifest(sidecar)
	} else if raw, ok := pm.manifestBytes(); ok {
		ins.ManifestSource = "embedded (metadata_props " + ManifestKey + ")"
		man, err = ParseManifest(raw)
	} else {
		err = fmt.Errorf("no %q metadata entry and no sidecar %s", ManifestKey, SidecarPath(path))
		ins.InitCommand = InitCommand(path, data)
	}
	if err != nil {
		ins.ManifestError = err.Error()
	} else {
		ins.Manifest = man
	}
	return ins, nil
}

// CheckRuntime loads the inspected model with ONNX Runtime (Init must have
// succeeded) and records whether it loads and matches its manifest.
func (ins *Inspection) CheckRuntime(libPath string, opts Options) {
	rc := &RuntimeCheck{Library: libPath}
	ins.Runtime = rc
	t0 := time.Now()
	m, err := Load(ins.Path, opts)
	if err != nil {
		rc.Error = err.Error()
		return
	}
	rc.LoadMS = float64(time.Since(t0).Microseconds()) / 1000
	rc.OK = true
	if err := m.Close(); err != nil {
		rc.OK, rc.Error = false, err.Error()
	}
}

// SidecarPath returns where the sidecar manifest of a model file lives:
// NAME.manifest.json beside NAME.onnx.
func SidecarPath(modelPath string) string {
	return strings.TrimSuffix(modelPath, ".onnx") + ".manifest.json"
}

// readSidecar returns the sidecar manifest's bytes, or nil if there is none.
func readSidecar(modelPath string) ([]byte, error) {
	b, err := os.ReadFile(SidecarPath(modelPath))
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("read sidecar manifest: %w", err)
	}
	return b, nil
}
