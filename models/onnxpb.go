package models

import (
	"fmt"
	"strconv"
	"strings"

	"google.golang.org/protobuf/encoding/protowire"

	"github.com/midsag/midsag"
)

// Field numbers of the ONNX protobuf messages this package reads, from
// onnx/onnx.proto (github.com/onnx/onnx, IR version 8 and later; the numbers
// are stable across IR versions).
const (
	modelIRVersion       = 1  // ModelProto.ir_version (int64)
	modelProducerName    = 2  // ModelProto.producer_name
	modelProducerVersion = 3  // ModelProto.producer_version
	modelGraph           = 7  // ModelProto.graph (GraphProto)
	modelOpsetImport     = 8  // ModelProto.opset_import (OperatorSetIdProto)
	modelMetadataProps   = 14 // ModelProto.metadata_props (StringStringEntryProto)

	opsetDomain  = 1 // OperatorSetIdProto.domain
	opsetVersion = 2 // OperatorSetIdProto.version

	entryKey   = 1 // StringStringEntryProto.key
	entryValue = 2 // StringStringEntryProto.value

	graphNode        = 1  // GraphProto.node (NodeProto)
	graphInitializer = 5  // GraphProto.initializer (TensorProto)
	graphInput       = 11 // GraphProto.input (ValueInfoProto)
	graphOutput      = 12 // GraphProto.output (ValueInfoProto)

	nodeOutput = 2 // NodeProto.output
	nodeOpType = 4 // NodeProto.op_type
	nodeDomain = 7 // NodeProto.domain

	tensorName = 8 // TensorProto.name

	valueInfoName = 1 // ValueInfoProto.name
	valueInfoType = 2 // ValueInfoProto.type (TypeProto)

	typeTensor     = 1 // TypeProto.tensor_type (TypeProto.Tensor)
	tensorElemType = 1 // TypeProto.Tensor.elem_type (TensorProto.DataType)
	tensorShape    = 2 // TypeProto.Tensor.shape (TensorShapeProto)
	shapeDim       = 1 // TensorShapeProto.dim (Dimension)
	dimValue       = 1 // TensorShapeProto.Dimension.dim_value (int64)
	dimParam       = 2 // TensorShapeProto.Dimension.dim_param (string)
)

// elemTypeNames are the TensorProto.DataType enum values of onnx/onnx.proto.
var elemTypeNames = map[int64]string{
	1: "float32", 2: "uint8", 3: "int8", 4: "uint16", 5: "int16", 6: "int32",
	7: "int64", 8: "string", 9: "bool", 10: "float16", 11: "float64",
	12: "uint32", 13: "uint64", 14: "complex64", 15: "complex128", 16: "bfloat16",
}

// field is one top-level protobuf field: its number, wire type, value bytes
// (for varints, the decoded value in num) and its full encoding.
type field struct {
	num  protowire.Number
	typ  protowire.Type
	val  []byte
	u    uint64
	full []byte
}

// fields splits a protobuf message into its fields, refusing malformed input.
func fields(b []byte) ([]field, error) {
	var out []field
	for len(b) > 0 {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 {
			return nil, fmt.Errorf("bad protobuf tag: %w", protowire.ParseError(n))
		}
		m := protowire.ConsumeFieldValue(num, typ, b[n:])
		if m < 0 {
			return nil, fmt.Errorf("bad protobuf field %d: %w", num, protowire.ParseError(m))
		}
		f := field{num: num, typ: typ, full: b[:n+m]}
		v := b[n : n+m]
		switch typ {
		case protowire.BytesType:
			f.val, _ = protowire.ConsumeBytes(v)
		case protowire.VarintType:
			f.u, _ = protowire.ConsumeVarint(v)
		}
		out = append(out, f)
		b = b[n+m:]
	}
	return out, nil
}

// pbValueInfo is a graph input or output read from the protobuf.
type pbValueInfo struct {
	name     string
	elemType string
	dims     []string
}

// pbModel is what this package reads from a ModelProto without ONNX Runtime.
type pbModel struct {
	irVersion       int64
	producerName    string
	producerVersion string
	opsets          []Opset
	opCounts        map[string]int
	nodes           int
	// producers maps each node output's name to the node's operator.
	producers       map[string]string
	inputs, outputs []pbValueInfo
	metadata        []MetadataEntry
}

// parseModel walks a serialized ModelProto. Errors carry ReasonBadModel.
func parseModel(data []byte) (*pbModel, error) {
	top, err := fields(data)
	if err != nil {
		return nil, badModel("model", err)
	}
	m := &pbModel{opCounts: map[string]int{}, producers: map[string]string{}}
	graph, sawGraph, err := m.parseTop(top)
	if err != nil {
		return nil, err
	}
	if !sawGraph || m.irVersion == 0 {
		return nil, midsag.Rejectf(midsag.ReasonBadModel, "not an ONNX model: no ir_version or graph")
	}
	gfs, err := fields(graph)
	if err != nil {
		return nil, badModel("graph", err)
	}
	if err := m.parseGraph(gfs); err != nil {
		return nil, err
	}
	return m, nil
}

// badModel refuses a model whose part what does not parse.
func badModel(what string, err error) error {
	return midsag.Reject(midsag.ReasonBadModel, "not an ONNX model: "+what, err)
}

// parseTop reads ModelProto's own fields into m and returns the graph's
// bytes and whether there was one.
func (m *pbModel) parseTop(top []field) (graph []byte, sawGraph bool, err error) {
	for _, f := range top {
		switch {
		case f.num == modelIRVersion && f.typ == protowire.VarintType:
			m.irVersion = int64(f.u)
		case f.typ != protowire.BytesType:
		case f.num == modelProducerName:
			m.producerName = string(f.val)
		case f.num == modelProducerVersion:
			m.producerVersion = string(f.val)
		case f.num == modelGraph:
			graph, sawGraph = f.val, true
		case f.num == modelOpsetImport:
			o, err := parseOpset(f.val)
			if err != nil {
				return nil, false, badModel("opset_import", err)
			}
			m.opsets = append(m.opsets, o)
		case f.num == modelMetadataProps:
			k, v, err := parseEntry(f.val)
			if err != nil {
				return nil, false, badModel("metadata_props", err)
			}
			m.metadata = append(m.metadata, MetadataEntry{Key: k, Value: v})
		}
	}
	return graph, sawGraph, nil
}

func parseOpset(b []byte) (Opset, error) {
	fs, err := fields(b)
	if err != nil {
		return Opset{}, err
	}
	var o Opset
	for _, g := range fs {
		switch {
		case g.num == opsetDomain && g.typ == protowire.BytesType:
			o.Domain = string(g.val)
		case g.num == opsetVersion && g.typ == protowire.VarintType:
			o.Version = int64(g.u)
		}
	}
	return o, nil
}

// parseGraph counts the graph's nodes by operator and lists its inputs
// (initializers left out) and outputs.
func (m *pbModel) parseGraph(gfs []field) error {
	initializers, err := initializerNames(gfs)
	if err != nil {
		return err
	}
	for _, f := range gfs {
		if f.typ != protowire.BytesType {
			continue
		}
		switch f.num {
		case graphNode:
			op, outs, err := nodeOp(f.val)
			if err != nil {
				return badModel("node", err)
			}
			for _, o := range outs {
				m.producers[o] = op
			}
			m.opCounts[op]++
			m.nodes++
		case graphInput, graphOutput:
			vi, err := parseValueInfo(f.val)
			if err != nil {
				return badModel("graph input/output", err)
			}
			switch {
			case f.num == graphOutput:
				m.outputs = append(m.outputs, vi)
			case !initializers[vi.name]:
				// Before IR version 4 initializers were also listed as
				// inputs; they are weights, not inputs a caller feeds.
				m.inputs = append(m.inputs, vi)
			}
		}
	}
	return nil
}

// initializerNames returns the names of the graph's initializers.
func initializerNames(gfs []field) (map[string]bool, error) {
	names := map[string]bool{}
	for _, f := range gfs {
		if f.num != graphInitializer || f.typ != protowire.BytesType {
			continue
		}
		tfs, err := fields(f.val)
		if err != nil {
			return nil, badModel("initializer", err)
		}
		for _, t := range tfs {
			if t.num == tensorName && t.typ == protowire.BytesType {
				names[string(t.val)] = true
			}
		}
	}
	return names, nil
}

// nodeOp returns a NodeProto's operator and output names. Custom-domain
// ops are named with their domain so they cannot be confused with standard
// ops of the same name.
func nodeOp(b []byte) (string, []string, error) {
	nfs, err := fields(b)
	if err != nil {
		return "", nil, err
	}
	var op, domain string
	var outs []string
	for _, g := range nfs {
		switch {
		case g.num == nodeOutput && g.typ == protowire.BytesType:
			outs = append(outs, string(g.val))
		case g.num == nodeOpType && g.typ == protowire.BytesType:
			op = string(g.val)
		case g.num == nodeDomain && g.typ == protowire.BytesType:
			domain = string(g.val)
		}
	}
	if domain != "" && domain != "ai.onnx" {
		op = domain + "." + op
	}
	return op, outs, nil
}

func parseEntry(b []byte) (key, value string, err error) {
	fs, err := fields(b)
	if err != nil {
		return "", "", err
	}
	for _, f := range fs {
		switch {
		case f.num == entryKey && f.typ == protowire.BytesType:
			key = string(f.val)
		case f.num == entryValue && f.typ == protowire.BytesType:
			value = string(f.val)
		}
	}
	return key, value, nil
}

func parseValueInfo(b []byte) (pbValueInfo, error) {
	var vi pbValueInfo
	fs, err := fields(b)
	if err != nil {
		return vi, err
	}
	for _, f := range fs {
		if f.typ != protowire.BytesType {
			continue
		}
		switch f.num {
		case valueInfoName:
			vi.name = string(f.val)
		case valueInfoType:
			if err := parseTensorType(f.val, &vi); err != nil {
				return vi, err
			}
		}
	}
	return vi, nil
}

func parseTensorType(b []byte, vi *pbValueInfo) error {
	tfs, err := fields(b)
	if err != nil {
		return err
	}
	for _, t := range tfs {
		if t.num != typeTensor || t.typ != protowire.BytesType {
			continue
		}
		vi.elemType = "non-tensor"
		fs, err := fields(t.val)
		if err != nil {
			return err
		}
		for _, f := range fs {
			switch {
			case f.num == tensorElemType && f.typ == protowire.VarintType:
				vi.elemType = elemTypeNames[int64(f.u)]
				if vi.elemType == "" {
					vi.elemType = fmt.Sprintf("type%d", f.u)
				}
			case f.num == tensorShape && f.typ == protowire.BytesType:
				dims, err := parseShape(f.val)
				if err != nil {
					return err
				}
				vi.dims = dims
			}
		}
	}
	return nil
}

// parseShape returns each dimension as its value, its symbolic name, or "?"
// when the dimension is unknown.
func parseShape(b []byte) ([]string, error) {
	dims := []string{}
	fs, err := fields(b)
	if err != nil {
		return nil, err
	}
	for _, f := range fs {
		if f.num != shapeDim || f.typ != protowire.BytesType {
			continue
		}
		ds, err := fields(f.val)
		if err != nil {
			return nil, err
		}
		d := "?"
		for _, g := range ds {
			switch {
			case g.num == dimValue && g.typ == protowire.VarintType:
				d = fmt.Sprint(int64(g.u))
			case g.num == dimParam && g.typ == protowire.BytesType:
				d = string(g.val)
			}
		}
		dims = append(dims, d)
	}
	return dims, nil
}

// EmbedManifest returns a copy of the ONNX model with manifest stored in its
// metadata_props under ManifestKey; any earlier entry with that key is
// dropped. The manifest is validated first so that a model never carries
// one this package would refuse. Protobuf field order is not significant
// (protobuf language guide, "Encoding"), so the entry is appended at the end.
func EmbedManifest(onnx []byte, manifest []byte) ([]byte, error) {
	if _, err := ParseManifest(manifest); err != nil {
		return nil, fmt.Errorf("embed manifest: %w", err)
	}
	if _, err := parseModel(onnx); err != nil {
		return nil, fmt.Errorf("embed manifest: %w", err)
	}
	top, err := fields(onnx)
	if err != nil {
		return nil, fmt.Errorf("embed manifest: %w", err)
	}
	out := make([]byte, 0, len(onnx)+len(manifest)+32)
	for _, f := range top {
		if f.num == modelMetadataProps && f.typ == protowire.BytesType {
			if k, _, err := parseEntry(f.val); err == nil && k == ManifestKey {
				continue
			}
		}
		out = append(out, f.full...)
	}
	var entry []byte
	entry = protowire.AppendTag(entry, entryKey, protowire.BytesType)
	entry = protowire.AppendString(entry, ManifestKey)
	entry = protowire.AppendTag(entry, entryValue, protowire.BytesType)
	entry = protowire.AppendBytes(entry, manifest)
	out = protowire.AppendTag(out, modelMetadataProps, protowire.BytesType)
	out = protowire.AppendBytes(out, entry)
	return out, nil
}

// intDims returns the shape with symbolic or unknown dimensions as -1,
// as ONNX Runtime reports them, or nil for a value that is not a tensor
// or has no declared shape.
func (v pbValueInfo) intDims() []int64 {
	if v.dims == nil {
		return nil
	}
	out := make([]int64, len(v.dims))
	for i, d := range v.dims {
		n, err := strconv.ParseInt(d, 10, 64)
		if err != nil || n < 0 {
			n = -1
		}
		out[i] = n
	}
	return out
}

// describe says what the value is, for errors: "float32 [N,3,32,32]".
func (v pbValueInfo) describe() string {
	if v.elemType == "" {
		return "not a tensor"
	}
	if v.dims == nil {
		return v.elemType + " of undeclared shape"
	}
	return v.elemType + " [" + strings.Join(v.dims, ",") + "]"
}

// manifest returns the sidecar manifest when given, else the embedded one.
func (m *pbModel) manifest(sidecar []byte) (*Manifest, error) {
	if sidecar != nil {
		man, err := ParseManifest(sidecar)
		if err != nil {
			return nil, fmt.Errorf("sidecar manifest: %w", err)
		}
		return man, nil
	}
	raw, ok := m.manifestBytes()
	if !ok {
		return nil, midsag.Rejectf(midsag.ReasonBadModel,
			"model has no %q metadata entry and no sidecar manifest; write one with \"midsag model init MODEL.onnx\" (\"midsag model inspect MODEL.onnx\" prints the full command)", ManifestKey)
	}
	return ParseManifest(raw)
}

// ReadManifest returns the manifest embedded in an ONNX model's metadata.
// A model without one, or with one that does not validate, is refused with
// midsag.ReasonBadModel.
func ReadManifest(onnx []byte) (*Manifest, error) {
	pm, err := parseModel(onnx)
	if err != nil {
		return nil, err
	}
	return pm.manifest(nil)
}

// manifestBytes returns the last ManifestKey entry, as ONNX Runtime's
// metadata map keeps the last of duplicate keys (from memory).
func (m *pbModel) manifestBytes() ([]byte, bool) {
	var raw []byte
	found := false
	for _, e := range m.metadata {
		if e.Key == ManifestKey {
			raw, found = []byte(e.Value), true
		}
	}
	return raw, found
}
