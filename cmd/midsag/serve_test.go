package main

import (
	"archive/zip"
	"bufio"
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/json"
	"encoding/pem"
	"fmt"
	"io"
	"io/fs"
	"math/big"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
	"github.com/midsag/midsag/server/store"
)

// TestMain lets the test binary stand in for the midsag binary: with
// MIDSAG_TEST_AS_MAIN=1 it runs the CLI on its arguments after "--", so
// end-to-end tests start real server processes they can SIGKILL.
func TestMain(m *testing.M) {
	if os.Getenv("MIDSAG_TEST_AS_MAIN") == "1" {
		args := os.Args[1:]
		for i, a := range args {
			if a == "--" {
				args = args[i+1:]
				break
			}
		}
		main2(args)
		return
	}
	os.Exit(m.Run())
}

// main2 is main with explicit arguments.
func main2(args []string) {
	os.Args = append([]string{"midsag"}, args...)
	main()
}

// service is a midsag serve child process on loopback ports.
type service struct {
	t                       testing.TB
	cmd                     *exec.Cmd
	http, grpc, dicom, data string
	log                     *testtool.Buffer
	exited                  chan struct{}
}

// freePort returns a free loopback address for a service listener.
func freePort(t testing.TB) string { return testtool.FreeAddr(t) }

// startService starts midsag serve over data (a folder that may hold a
// previous run's store) and waits until /readyz answers.
func startService(t testing.TB, data string, extra ...string) *service {
	t.Helper()
	return startServiceWith(t, http.DefaultClient, "http", data, extra...)
}

// startServiceTLS starts the service with TLS flags among extra; readiness
// is polled over HTTPS without checking the test's self-signed certificate.
func startServiceTLS(t testing.TB, data string, extra ...string) *service {
	t.Helper()
	insecureClient := &http.Client{Transport: &http.Transport{TLSClientConfig: &tls.Config{InsecureSkipVerify: true}}}
	return startServiceWith(t, insecureClient, "https", data, extra...)
}

func startServiceWith(t testing.TB, client *http.Client, scheme, data string, extra ...string) *service {
	t.Helper()
	requireORT(t)
	s := &service{t: t, http: freePort(t), grpc: freePort(t), dicom: freePort(t), data: data, log: &testtool.Buffer{}, exited: make(chan struct{})}
	args := append([]string{"-test.run=^$", "--", "serve", "--data-dir", data, "--http-addr", s.http,
		"--grpc-addr", s.grpc, "--dicom-addr", s.dicom, "--settle", "500ms", "--shutdown-grace", "5s"}, extra...)
	s.cmd = exec.Command(os.Args[0], args...)
	s.cmd.Env = append(os.Environ(), "MIDSAG_TEST_AS_MAIN=1")
	s.cmd.Stderr = s.log
	s.cmd.Stdout = s.log
	if err := s.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() { s.cmd.Wait(); close(s.exited) }()
	t.Cleanup(func() { s.kill() })
	deadline := time.Now().Add(20 * time.Second)
	for time.Now().Before(deadline) {
		resp, err := client.Get(scheme + "://" + s.http + "/readyz")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == 200 {
				return s
			}
		}
		select {
		case <-s.exited:
			t.Fatalf("service exited: %s", s.log.String())
		case <-time.After(100 * time.Millisecond):
		}
	}
	t.Fatalf("service not ready: %s", s.log.String())
	return nil
}

func (s *service) kill() {
	if s.cmd.Process != nil {
		s.cmd.Process.Signal(syscall.SIGKILL)
		<-s.exited
	}
}

// terminate sends SIGTERM and waits for a clean exit.
func (s *service) terminate() {
	s.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-s.exited:
	case <-time.After(20 * time.Second):
		s.t.Fatalf("service did not stop on SIGTERM: %s", s.log.String())
	}
}

// results lists the records of a study through REST.
func (s *service) results(study string) []map[string]any {
	resp, err := http.Get("http://" + s.http + "/v1/results?study_instance_uid=" + study)
	if err != nil {
		s.t.Fatal(err)
	}
	defer resp.Body.Close()
	var out struct {
		Results []map[string]any `json:"results"`
	}
	json.NewDecoder(resp.Body).Decode(&out)
	return out.Results
}

// waitResult waits through REST for a finished result of the study
// (done, or rejected with a reason code when what arrived cannot be
// scored).
func (s *service) waitResult(study string) map[string]any {
	s.t.Helper()
	return s.waitRecord(study, "a finished result", func(r map[string]any) bool {
		return r["status"] == "done" || r["status"] == "rejected"
	})
}

// waitCovering waits through REST for a done result of the study that
// read all n instances sent (the series candidates' instance counts add
// up to n). A study that settled while it was still arriving gets an
// earlier version covering fewer; that one is not the answer.
func (s *service) waitCovering(study string, n int) map[string]any {
	s.t.Helper()
	return s.waitRecord(study, fmt.Sprintf("a done result covering %d instances", n), func(r map[string]any) bool {
		return r["status"] == "done" && coveredInstances(r) == n
	})
}

// coveredInstances adds up the instances of a result's series candidates.
func coveredInstances(r map[string]any) int {
	n := 0
	cands, _ := r["series_candidates"].([]any)
	for _, c := range cands {
		m, _ := c.(map[string]any)
		v, _ := m["instances"].(float64)
		n += int(v)
	}
	return n
}

// waitRecord waits up to 30 s for a record of the study that ok accepts;
// on timeout it fails with every record's version, status, reason and
// coverage, and the service log.
func (s *service) waitRecord(study, what string, ok func(map[string]any) bool) map[string]any {
	s.t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	var last []map[string]any
	for time.Now().Before(deadline) {
		last = s.results(study)
		for _, r := range last {
			if ok(r) {
				return r
			}
		}
		time.Sleep(100 * time.Millisecond)
	}
	var seen []string
	for _, r := range last {
		seen = append(seen, fmt.Sprintf("version %v: status %v, reason %v, %d instances, message %v",
			r["version"], r["status"], r["reason"], coveredInstances(r), r["message"]))
	}
	s.t.Fatalf("no %s for study %s; records:\n%s\nservice log:\n%s", what, study, strings.Join(seen, "\n"), s.log.String())
	return nil
}

// countFiles counts the files under dir.
func countFiles(t testing.TB, dir string) int {
	t.Helper()
	n := 0
	err := filepath.WalkDir(dir, func(_ string, d fs.DirEntry, err error) error {
		if err == nil && !d.IsDir() {
			n++
		}
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	return n
}

func tcpNoDelay() []string { return append(os.Environ(), "TCP_NODELAY=1") }

// TestServeStorescuEchoAndREST sends a phantom study with DCMTK's storescu
// (the reference DICOM peer) and reads its result through REST; echoscu
// verifies; the result is the phantom's truth (the true midline slice).
func TestServeStorescuEchoAndREST(t *testing.T) {
	s := startService(t, t.TempDir())
	dir := t.TempDir()
	// storescu proposes one compressed syntax per run; server/dimse tests
	// cover every syntax, this one covers the path to a result.
	truths, err := phantom.Generate(dir, phantom.Options{Studies: 1, Seed: 61, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	host, port, _ := net.SplitHostPort(s.dicom)
	echo := exec.Command(testtool.Command(t, "echoscu"), "-aec", "MIDSAG", host, port)
	echo.Env = tcpNoDelay()
	if out, err := echo.CombinedOutput(); err != nil {
		t.Fatalf("echoscu: %v %s", err, out)
	}
	st := exec.Command(testtool.Command(t, "storescu"), "-aec", "MIDSAG", "+sd", "+r", host, port, filepath.Join(dir, truths[0].Study))
	st.Env = tcpNoDelay()
	if out, err := st.CombinedOutput(); err != nil {
		t.Fatalf("storescu: %v %s", err, out)
	}
	r := s.waitCovering(truths[0].StudyInstanceUID, countFiles(t, filepath.Join(dir, truths[0].Study)))
	// The phantom writes Patient's Name PHANTOM^0001 and Patient ID
	// NSIL61-0001 (phantom/write.go); neither may reach the logs.
	if logs := s.log.String(); strings.Contains(logs, "PHANTOM^") || strings.Contains(logs, "NSIL61-") {
		t.Errorf("service log holds patient name or ID:\n%s", logs)
	}
	if r["center_sop_instance_uid"] != truths[0].CenterSOPInstanceUID || r["notice"] != midsag.Notice {
		t.Errorf("result version %v centre %v, truth %s; notice %q", r["version"], r["center_sop_instance_uid"], truths[0].CenterSOPInstanceUID, r["notice"])
	}
	s.terminate()
}

func zipStudy(t *testing.T, dir string) []byte {
	t.Helper()
	var b bytes.Buffer
	zw := zip.NewWriter(&b)
	entries, _ := os.ReadDir(dir)
	for _, e := range entries {
		data, _ := os.ReadFile(filepath.Join(dir, e.Name()))
		w, _ := zw.Create(e.Name())
		w.Write(data)
	}
	zw.Close()
	return b.Bytes()
}

// TestServeCurlAndGRPCAgree posts a zip with curl and streams the same
// study with the grpc-go client: both give the same centre slice and
// probability. A gzip body gets 415 and an oversized body 413, each with
// its reason code.
func TestServeCurlAndGRPCAgree(t *testing.T) {
	s := startService(t, t.TempDir(), "--max-body", "8000000")
	curl := testtool.Command(t, "curl")
	dir := t.TempDir()
	truths, err := phantom.Generate(dir, phantom.Options{Studies: 1, Seed: 62, NoDecoys: true})
	if err != nil {
		t.Fatal(err)
	}
	studyDir := filepath.Join(dir, truths[0].Study)
	zipPath := filepath.Join(t.TempDir(), "study.zip")
	os.WriteFile(zipPath, zipStudy(t, studyDir), 0o644)
	out, err := exec.Command(curl, "-sS", "-w", "\n%{http_code}", "--data-binary", "@"+zipPath, "-H", "Content-Type: application/zip",
		"http://"+s.http+"/v1/studies:score").Output()
	if err != nil {
		t.Fatal(err)
	}
	body, code := splitCode(string(out))
	if code != "200" {
		t.Fatalf("curl zip: %s %s", code, body)
	}
	var rest map[string]any
	json.Unmarshal([]byte(body), &rest)
	if rest["center_sop_instance_uid"] != truths[0].CenterSOPInstanceUID {
		t.Errorf("REST centre %v, truth %s", rest["center_sop_instance_uid"], truths[0].CenterSOPInstanceUID)
	}

	conn, err := grpc.NewClient(s.grpc, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	stream, err := midsagv1.NewStudyScoringClient(conn).ScoreStudy(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	stream.Send(&midsagv1.ScoreStudyRequest{Part: &midsagv1.ScoreStudyRequest_Options{Options: &midsagv1.ScoreOptions{}}})
	files, _ := os.ReadDir(studyDir)
	for _, f := range files {
		data, _ := os.ReadFile(filepath.Join(studyDir, f.Name()))
		for off := 0; off < len(data); off += 64 << 10 {
			end := min(off+64<<10, len(data))
			stream.Send(&midsagv1.ScoreStudyRequest{Part: &midsagv1.ScoreStudyRequest_Chunk{Chunk: &midsagv1.InstanceChunk{Data: data[off:end], EndOfInstance: end == len(data)}}})
		}
	}
	resp, err := stream.CloseAndRecv()
	if err != nil {
		t.Fatal(err)
	}
	g := resp.GetResult()
	if g.GetCenterSopInstanceUid() != rest["center_sop_instance_uid"] || fmt.Sprint(g.GetCalibratedProbability()) != fmt.Sprint(rest["calibrated_probability"]) {
		t.Errorf("gRPC centre %s p %v, REST centre %v p %v", g.GetCenterSopInstanceUid(), g.GetCalibratedProbability(), rest["center_sop_instance_uid"], rest["calibrated_probability"])
	}

	gz := filepath.Join(t.TempDir(), "study.zip.gz")
	exec.Command("sh", "-c", "gzip -c "+zipPath+" > "+gz).Run()
	big := filepath.Join(t.TempDir(), "big.bin")
	os.WriteFile(big, bytes.Repeat([]byte{1}, 9000000), 0o644)
	for _, c := range []struct{ file, code, reason string }{{gz, "415", "not_dicom"}, {big, "413", "too_large"}} {
		out, _ := exec.Command(curl, "-sS", "-w", "\n%{http_code}", "--data-binary", "@"+c.file, "http://"+s.http+"/v1/studies:score").Output()
		body, code := splitCode(string(out))
		if code != c.code || !strings.Contains(body, c.reason) {
			t.Errorf("%s: %s %s, want %s %s", filepath.Base(c.file), code, body, c.code, c.reason)
		}
	}
}

func splitCode(out string) (string, string) {
	i := strings.LastIndex(out, "\n")
	return out[:i], strings.TrimSpace(out[i+1:])
}

// TestServeKillDuringStorescu kills the service with SIGKILL while
// storescu is sending, restarts it over the same data folder, and checks
// that every instance storescu saw acknowledged with status Success
// (0000) is stored and its study scored.
func TestServeKillDuringStorescu(t *testing.T) {
	data := t.TempDir()
	s := startService(t, data)
	dir := t.TempDir()
	truths, err := phantom.Generate(dir, phantom.Options{Studies: 4, Seed: 63, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	host, port, _ := net.SplitHostPort(s.dicom)
	st := exec.Command(testtool.Command(t, "storescu"), "-v", "-aec", "MIDSAG", "+sd", "+r", host, port, dir)
	st.Env = tcpNoDelay()
	pipe, _ := st.StdoutPipe()
	st.Stderr = st.Stdout
	if err := st.Start(); err != nil {
		t.Fatal(err)
	}
	// storescu -v logs "Sending file: PATH" then "Received Store Response
	// (Success)" for each file.
	var acked []string
	var current string
	sc := bufio.NewScanner(pipe)
	killed := false
	for sc.Scan() {
		line := sc.Text()
		if i := strings.Index(line, "Sending file: "); i >= 0 {
			current = strings.TrimSpace(line[i+len("Sending file: "):])
		}
		if strings.Contains(line, "Received Store Response (Success)") && current != "" {
			acked = append(acked, current)
			if len(acked) == 60 && !killed {
				s.kill()
				killed = true
			}
		}
	}
	st.Wait()
	if !killed {
		t.Fatalf("storescu finished before the kill (%d acknowledged)", len(acked))
	}
	s2 := startService(t, data)
	studies := map[string]bool{}
	for _, p := range acked {
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		inst, err := readHeader(b)
		if err != nil {
			t.Fatal(err)
		}
		studies[inst.StudyInstanceUID] = true
	}
	// Every study with an acknowledged instance is scored after restart,
	// and every acknowledged instance of it is on record.
	for study := range studies {
		s2.waitResult(study)
	}
	s2.terminate()
	stored := storedSOPs(t, data)
	for _, p := range acked {
		b, _ := os.ReadFile(p)
		inst, _ := readHeader(b)
		if !stored[inst.SOPInstanceUID] {
			t.Errorf("acknowledged instance %s lost", filepath.Base(p))
		}
	}
	t.Logf("%d instances acknowledged before SIGKILL, %d studies, all present after restart; %d studies generated", len(acked), len(studies), len(truths))
}

func readHeader(b []byte) (*midsag.Instance, error) {
	return preprocess.New(preprocess.Options{}).Read("file", bytes.NewReader(b))
}

// storedSOPs opens the stopped service's store and returns the SOP
// Instance UIDs whose spool files read back as DICOM.
func storedSOPs(t *testing.T, data string) map[string]bool {
	t.Helper()
	st, err := store.Open(data, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	recs, _, err := st.ListRecords(context.Background(), store.Query{PageSize: 500})
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]bool{}
	seen := map[string]bool{}
	for _, r := range recs {
		if seen[r.StudyInstanceUID] {
			continue
		}
		seen[r.StudyInstanceUID] = true
		insts, err := st.Instances(context.Background(), r.StudyInstanceUID, 0)
		if err != nil {
			t.Fatal(err)
		}
		for _, in := range insts {
			rc, err := st.Open(in)
			if err != nil {
				t.Errorf("instance %s: %v", in.SOPInstanceUID, err)
				continue
			}
			b, _ := io.ReadAll(rc)
			rc.Close()
			if _, err := readHeader(b); err != nil {
				t.Errorf("stored instance %s does not read back: %v", in.SOPInstanceUID, err)
				continue
			}
			out[in.SOPInstanceUID] = true
		}
	}
	return out
}

// TestServeTLSAndTokens starts the service with a self-signed certificate
// and a token file: curl over HTTPS needs the token for /v1/models but not
// for /healthz, and the grpc-go client needs TLS and the token.
func TestServeTLSAndTokens(t *testing.T) {
	dir := t.TempDir()
	certPEM, keyPEM := selfSigned(t)
	cert, key, tokens := filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem"), filepath.Join(dir, "tokens")
	os.WriteFile(cert, certPEM, 0o600)
	os.WriteFile(key, keyPEM, 0o600)
	os.WriteFile(tokens, []byte("# research group token\nsecret-token-1\n"), 0o600)
	s := startServiceTLS(t, dir, "--tls-cert", cert, "--tls-key", key, "--token-file", tokens)
	curl := testtool.Command(t, "curl")
	get := func(path string, hdr ...string) string {
		args := append([]string{"-sS", "-o", "/dev/null", "-w", "%{http_code}", "--cacert", cert}, hdr...)
		out, err := exec.Command(curl, append(args, "https://localhost:"+portOf(s.http)+path)...).Output()
		if err != nil {
			t.Fatalf("curl %s: %v", path, err)
		}
		return string(out)
	}
	if c := get("/healthz"); c != "200" {
		t.Errorf("/healthz over TLS: %s", c)
	}
	if c := get("/v1/models"); c != "401" {
		t.Errorf("/v1/models without token: %s, want 401", c)
	}
	if c := get("/v1/models", "-H", "Authorization: Bearer secret-token-1"); c != "200" {
		t.Errorf("/v1/models with token: %s", c)
	}
	pool := x509.NewCertPool()
	pool.AppendCertsFromPEM(certPEM)
	conn, err := grpc.NewClient("localhost:"+portOf(s.grpc), grpc.WithTransportCredentials(credentials.NewTLS(&tls.Config{RootCAs: pool})))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	client := midsagv1.NewStudyScoringClient(conn)
	if _, err := client.ListModels(context.Background(), &midsagv1.ListModelsRequest{}); status.Code(err) != codes.Unauthenticated {
		t.Errorf("gRPC without token: %v", err)
	}
	ctx := metadata.AppendToOutgoingContext(context.Background(), "authorization", "Bearer secret-token-1")
	if _, err := client.ListModels(ctx, &midsagv1.ListModelsRequest{}); err != nil {
		t.Errorf("gRPC with token over TLS: %v", err)
	}
}

func portOf(addr string) string {
	_, p, _ := net.SplitHostPort(addr)
	return p
}

// selfSigned makes a certificate for localhost with Go's crypto/x509.
func selfSigned(t *testing.T) ([]byte, []byte) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "localhost"},
		DNSNames: []string{"localhost"}, NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		KeyUsage: x509.KeyUsageDigitalSignature, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kb, _ := x509.MarshalECPrivateKey(key)
	return pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb})
}

// TestServeModelsDirReload lists the models folder's model through REST,
// then adds another file and sends SIGHUP: the new model is listed without
// a restart. The test models come from models/testdata (made by PyTorch).
func TestServeModelsDirReload(t *testing.T) {
	modelsDir := t.TempDir()
	copyFile(t, "../../models/testdata/tiny_logit.onnx", filepath.Join(modelsDir, "a.onnx"))
	s := startService(t, t.TempDir(), "--models-dir", modelsDir)
	names := func() string {
		resp, err := http.Get("http://" + s.http + "/v1/models")
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		var out struct {
			Models []struct {
				Name string `json:"name"`
			} `json:"models"`
		}
		json.NewDecoder(resp.Body).Decode(&out)
		var n []string
		for _, m := range out.Models {
			n = append(n, m.Name)
		}
		return strings.Join(n, ",")
	}
	if got := names(); !strings.Contains(got, "tiny_logit") || !strings.Contains(got, "midsag-demo") {
		t.Fatalf("models %q", got)
	}
	copyFile(t, "../../models/testdata/tiny_two.onnx", filepath.Join(modelsDir, "b.onnx"))
	s.cmd.Process.Signal(syscall.SIGHUP)
	deadline := time.Now().Add(10 * time.Second)
	for !strings.Contains(names(), "tiny_two") {
		if time.Now().After(deadline) {
			t.Fatalf("tiny_two not listed after SIGHUP: %s", names())
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// TestServeExplainSendsSecondaryCapture: with --send-to, a study stored by
// storescu is scored with an occlusion map, and the map reaches DCMTK's
// storescp as a Secondary Capture image (SOP Class 1.2.840.10008.5.1.4.1.1.7,
// checked with dcmdump) in the source study and patient; REST serves the
// same map as a PNG, and the log holds no patient name or ID.
func TestServeExplainSendsSecondaryCapture(t *testing.T) {
	scpDir := t.TempDir()
	scpAddr := freePort(t)
	scp := exec.Command(testtool.Command(t, "storescp"), "-aet", "NSIL_PACS", "-od", scpDir, portOf(scpAddr))
	scp.Env = tcpNoDelay()
	var scpLog testtool.Buffer
	scp.Stdout, scp.Stderr = &scpLog, &scpLog
	if err := scp.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() { scp.Process.Kill(); scp.Wait() }()
	s := startService(t, t.TempDir(), "--send-to", "NSIL_PACS@"+scpAddr)
	dir := t.TempDir()
	truths, err := phantom.Generate(dir, phantom.Options{Studies: 1, Seed: 64, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	st := exec.Command(testtool.Command(t, "storescu"), "-aec", "MIDSAG", "+sd", "+r", "127.0.0.1", portOf(s.dicom), filepath.Join(dir, truths[0].Study))
	st.Env = tcpNoDelay()
	if out, err := st.CombinedOutput(); err != nil {
		t.Fatalf("storescu: %v %s", err, out)
	}
	r := s.waitCovering(truths[0].StudyInstanceUID, countFiles(t, filepath.Join(dir, truths[0].Study)))
	if r["explanation"] == nil {
		t.Fatalf("result has no explanation: %v", r)
	}
	if logs := s.log.String(); strings.Contains(logs, "PHANTOM^") || strings.Contains(logs, "NSIL64-") {
		t.Errorf("service log holds patient name or ID")
	}
	resp, err := http.Get("http://" + s.http + "/v1/results/" + r["result_id"].(string) + "/heatmap.png")
	if err != nil {
		t.Fatal(err)
	}
	png, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || !bytes.HasPrefix(png, []byte("\x89PNG")) {
		t.Errorf("heatmap.png: %d, %d bytes", resp.StatusCode, len(png))
	}
	deadline := time.Now().Add(20 * time.Second)
	for {
		files, _ := filepath.Glob(filepath.Join(scpDir, "*"))
		if len(files) > 0 {
			out := testtool.Run(t, "dcmdump", "-Un", "+P", "0008,0016", "+P", "0020,000d", "+P", "0010,0010", "+P", "0010,0020", files[0])
			// Filed under the source patient: the phantom writes
			// PHANTOM^0001 and NSIL64-0001 (phantom/write.go).
			if !bytes.Contains(out, []byte("1.2.840.10008.5.1.4.1.1.7")) || !bytes.Contains(out, []byte(truths[0].StudyInstanceUID)) ||
				!bytes.Contains(out, []byte("PHANTOM^0001")) || !bytes.Contains(out, []byte("NSIL64-0001")) {
				t.Errorf("storescp received %s:\n%s", filepath.Base(files[0]), out)
			}
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("no Secondary Capture reached storescp; service log:\n%s\nstorescp:\n%s", s.log.String(), scpLog.String())
		}
		time.Sleep(100 * time.Millisecond)
	}
}

// TestServeStorescuCTInMRStudy: DCMTK storescu sends, in one
// association, a phantom MR study, pydicom's CT_small.dcm (CT Image
// Storage) moved into that study, and a copy of it bearing a SOP Instance
// UID under midsag's output root (as if a PACS forwarded midsag's own map
// back). The whole transfer succeeds; the study is scored from its MR
// instances only (the series candidates add up to the MR count), the CT
// is stored (the spool holds it), and midsag's own output is
// acknowledged and not stored.
func TestServeStorescuCTInMRStudy(t *testing.T) {
	s := startService(t, t.TempDir())
	dir := t.TempDir()
	truths, err := phantom.Generate(dir, phantom.Options{Studies: 1, Seed: 65, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	study := filepath.Join(dir, truths[0].Study)
	nMR := countFiles(t, study)
	extra := t.TempDir()
	py := testtool.Python(t, "pydicom")
	script := `import pydicom, sys
ds = pydicom.dcmread(sys.argv[1])
ds.StudyInstanceUID = sys.argv[2]
ds.save_as(sys.argv[3] + "/ct.dcm", write_like_original=False)
ds.SOPInstanceUID = ds.file_meta.MediaStorageSOPInstanceUID = sys.argv[4]
ds.save_as(sys.argv[3] + "/own.dcm", write_like_original=False)
`
	if out, err := exec.Command(py, "-c", script, testtool.PydicomFile(t, "CT_small.dcm"), truths[0].StudyInstanceUID, extra, midsag.NewOutputUID()).CombinedOutput(); err != nil {
		t.Fatalf("pydicom: %v\n%s", err, out)
	}
	st := exec.Command(testtool.Command(t, "storescu"), "-aec", "MIDSAG", "+sd", "+r", "127.0.0.1", portOf(s.dicom), study, extra)
	st.Env = tcpNoDelay()
	if out, err := st.CombinedOutput(); err != nil {
		t.Fatalf("storescu: %v %s", err, out)
	}
	r := s.waitCovering(truths[0].StudyInstanceUID, nMR)
	if r["center_sop_instance_uid"] != truths[0].CenterSOPInstanceUID {
		t.Errorf("centre %v, truth %s", r["center_sop_instance_uid"], truths[0].CenterSOPInstanceUID)
	}
	if logs := s.log.String(); !strings.Contains(logs, "C-STORE of midsag's own output acknowledged and dropped") {
		t.Errorf("no log line for midsag's own output:\n%s", logs)
	}
	s.terminate()
	// The spool holds the MR instances and the CT, not the own output.
	if n := countFiles(t, filepath.Join(s.data, "spool")); n != nMR+1 {
		t.Errorf("spool holds %d files, want %d MR + 1 CT", n, nMR)
	}
}
