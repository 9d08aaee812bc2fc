package server_test

import (
	"archive/zip"
	"bytes"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/grpcapi"
	"github.com/midsag/midsag/server/store"
)

// benchStudyZip is one phantom study with its decoy series, zipped.
func benchStudyZip(b *testing.B) ([]byte, []phantom.File) {
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 81, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 0)
	if err != nil {
		b.Fatal(err)
	}
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	for _, f := range files {
		w, _ := zw.Create(f.Name)
		w.Write(f.Data)
	}
	zw.Close()
	return buf.Bytes(), files
}

func benchModel(b *testing.B) *models.Model {
	ortest.Init(b)
	m, err := models.LoadBytes(demo.Name, demo.ONNX, nil, models.Options{})
	if err != nil {
		b.Fatal(err)
	}
	return m
}

// BenchmarkPipelineBaseline scores the study in memory with the Pipeline
// alone: the baseline the REST path is compared against.
func BenchmarkPipelineBaseline(b *testing.B) {
	_, files := benchStudyZip(b)
	m := benchModel(b)
	defer m.Close()
	p := &midsag.Pipeline{Pre: preprocess.New(preprocess.Options{}), Model: m}
	var sources []midsag.Source
	for _, f := range files {
		sources = append(sources, midsag.Source{Name: f.Name, Open: openBytes(f.Data)})
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := p.Run(context.Background(), sources); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkRESTScore posts the zipped study to POST /v1/studies:score of
// a service over a real store, and reports the pipeline's stages from the
// result (ms per op) and the rest of the request ("receive": upload,
// durable spooling, queueing) so the split can be read off one run.
func BenchmarkRESTScore(b *testing.B) {
	body, _ := benchStudyZip(b)
	m := benchModel(b)
	reg, _ := models.NewRegistry(m, "", models.Options{}, nil)
	defer reg.Close()
	st, err := store.Open(b.TempDir(), store.Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	core := server.New(server.Config{Store: st, Registry: reg, Pre: preprocess.New(preprocess.Options{}), Settle: time.Hour})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	go core.Run(ctx, time.Second)
	h, err := grpcapi.NewHTTPHandler(ctx, grpcapi.Config{Backend: core, Pre: preprocess.New(preprocess.Options{Lenient: true})}, nil)
	if err != nil {
		b.Fatal(err)
	}
	srv := httptest.NewServer(h)
	defer srv.Close()
	stages := map[string]float64{}
	var total float64
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		resp, err := http.Post(srv.URL+"/v1/studies:score", "application/zip", bytes.NewReader(body))
		if err != nil {
			b.Fatal(err)
		}
		var res midsag.Result
		json.NewDecoder(resp.Body).Decode(&res)
		resp.Body.Close()
		if resp.StatusCode != 200 {
			b.Fatalf("status %d", resp.StatusCode)
		}
		el := float64(time.Since(t0).Microseconds()) / 1000
		total += el
		for k, v := range res.TimingsMS {
			stages[k] += v
		}
		stages["receive"] += el - res.TimingsMS["total"]
	}
	n := float64(b.N)
	for _, k := range []string{"receive", "read", "pick_series", "pick_slices", "stack", "predict", "calibrate"} {
		b.ReportMetric(stages[k]/n, k+"-ms")
	}
	b.ReportMetric(stages["predict"]/total, "model-share")
}

func openBytes(b []byte) func() (io.ReadCloser, error) {
	return func() (io.ReadCloser, error) { return io.NopCloser(bytes.NewReader(b)), nil }
}
