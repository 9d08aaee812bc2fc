package grpcapi

import (
	"encoding/json"
	"reflect"
	"sort"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
)

// TestResultProtoKeepsEveryContractField checks the proto Result against
// the contract's other encoding: a midsag.Result marshalled with
// encoding/json must come out of ResultProto and protojson with every key
// and value unchanged. A field added to midsag.Result without the proto
// fails here, because DiscardUnknown would drop it silently.
func TestResultProtoKeepsEveryContractField(t *testing.T) {
	want := sampleResult()
	raw, err := json.Marshal(want)
	if err != nil {
		t.Fatal(err)
	}
	rec := server.Record{ID: want.ResultID, StudyInstanceUID: want.StudyInstanceUID, Version: 3,
		Status: server.StatusDone, ResultJSON: raw, CreatedAt: time.Unix(0, 0),
		FinishedAt: time.Date(2025, 3, 4, 5, 6, 9, 0, time.UTC)}
	res, err := ResultProto(rec)
	if err != nil {
		t.Fatal(err)
	}
	out, err := resultJSON.Marshal(res)
	if err != nil {
		t.Fatal(err)
	}
	var contract, got map[string]any
	if err := json.Unmarshal(raw, &contract); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatal(err)
	}
	for k, v := range contract {
		if !reflect.DeepEqual(got[k], v) {
			t.Errorf("%s: proto JSON has %#v, encoding/json has %#v", k, got[k], v)
		}
	}
	records := map[string]any{"version": 3.0, "status": "done", "reason": "", "message": "",
		"finished_at": "2025-03-04T05:06:09Z"}
	for k, v := range records {
		if got[k] != v {
			t.Errorf("record field %s = %#v, want %#v", k, got[k], v)
		}
	}
}

// TestResultProtoPending: a record without a result still names itself
// and carries the research notice.
func TestResultProtoPending(t *testing.T) {
	rec := server.Record{ID: "r9", StudyInstanceUID: "1.2", Version: 1, Status: server.StatusPending,
		ModelName: "m", CreatedAt: time.Date(2025, 1, 2, 3, 4, 5, 0, time.UTC)}
	res, err := ResultProto(rec)
	if err != nil {
		t.Fatal(err)
	}
	if res.GetResultId() != "r9" || res.GetStudyInstanceUid() != "1.2" || res.GetCreatedAt() != "2025-01-02T03:04:05Z" ||
		res.GetStatus() != "pending" || res.GetModel().GetName() != "m" || res.GetNotice() == "" || res.GetFinishedAt() != "" {
		t.Errorf("pending record converted to %v", res)
	}
}

// TestResultProtoRefusesCorruptJSON: a damaged stored result is an error,
// not an empty result.
func TestResultProtoRefusesCorruptJSON(t *testing.T) {
	if _, err := ResultProto(server.Record{ID: "x", ResultJSON: []byte(`{"probability":"high"`)}); err == nil {
		t.Fatal("no error for corrupt result JSON")
	}
}

// fill sets every exported field reachable from v to a non-zero value:
// strings "x", numbers 1, one-element slices and maps, allocated
// pointers. Fields encoding/json skips (tag "-") are left alone.
func fill(v reflect.Value) {
	switch v.Kind() {
	case reflect.Pointer:
		v.Set(reflect.New(v.Type().Elem()))
		fill(v.Elem())
	case reflect.Struct:
		if v.Type() == reflect.TypeOf(time.Time{}) {
			v.Set(reflect.ValueOf(time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC)))
			return
		}
		for i := 0; i < v.NumField(); i++ {
			if f := v.Type().Field(i); f.IsExported() && f.Tag.Get("json") != "-" {
				fill(v.Field(i))
			}
		}
	case reflect.Slice:
		v.Set(reflect.MakeSlice(v.Type(), 1, 1))
		fill(v.Index(0))
	case reflect.Array:
		for i := 0; i < v.Len(); i++ {
			fill(v.Index(i))
		}
	case reflect.Map:
		v.Set(reflect.MakeMap(v.Type()))
		k, e := reflect.New(v.Type().Key()).Elem(), reflect.New(v.Type().Elem()).Elem()
		fill(k)
		fill(e)
		v.SetMapIndex(k, e)
	case reflect.String:
		v.SetString("x")
	case reflect.Int, reflect.Int32, reflect.Int64:
		v.SetInt(1)
	case reflect.Float64, reflect.Float32:
		v.SetFloat(1)
	case reflect.Bool:
		v.SetBool(true)
	}
}

// keyPaths lists the object key paths of a decoded JSON value; array
// elements share the path of their array.
func keyPaths(prefix string, v any, out map[string]bool) {
	switch x := v.(type) {
	case map[string]any:
		for k, e := range x {
			p := prefix + "." + k
			out[p] = true
			if k != "timings_ms" { // a map of step names, not fields
				keyPaths(p, e, out)
			}
		}
	case []any:
		for _, e := range x {
			keyPaths(prefix+"[]", e, out)
		}
	}
}

// TestResultProtoKeepsEveryNestedField: every JSON field of midsag.Result, with
// every nested field set (the explanation included), survives the REST
// and gRPC conversion (ResultProto), which drops what the proto does not
// declare. It failed when the proto's Explanation lacked baseline, peak,
// peak_patient_mm, model_runs and raw_values.
func TestResultProtoKeepsEveryNestedField(t *testing.T) {
	var res midsag.Result
	fill(reflect.ValueOf(&res).Elem())
	b, err := json.Marshal(res)
	if err != nil {
		t.Fatal(err)
	}
	pb, err := ResultProto(server.Record{ID: "x", ResultJSON: b})
	if err != nil {
		t.Fatal(err)
	}
	out, err := resultJSON.Marshal(pb)
	if err != nil {
		t.Fatal(err)
	}
	var in, got any
	if err := json.Unmarshal(b, &in); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatal(err)
	}
	want, have := map[string]bool{}, map[string]bool{}
	keyPaths("", in, want)
	keyPaths("", got, have)
	var missing []string
	for p := range want {
		if !have[p] {
			missing = append(missing, p)
		}
	}
	sort.Strings(missing)
	if len(missing) > 0 {
		t.Errorf("the API result drops %v", missing)
	}
}
