package main

import (
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"os/signal"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/pipeline"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/dimse"
	"github.com/midsag/midsag/server/grpcapi"
	"github.com/midsag/midsag/server/store"
)

func init() {
	register("serve", "run the service: REST, STOW-RS, gRPC and DICOM listeners over a durable store", runServe)
}

// serveFlags are the flags of midsag serve.
type serveFlags struct {
	pipelineFlags
	modelsDir    string
	httpAddr     string
	grpcAddr     string
	dicomAddr    string
	aeTitle      string
	allowAE      string
	dataDir      string
	settle       time.Duration
	workers      int
	queue        int
	maxBody      int64
	inflight     int64
	readIdle     time.Duration
	minRate      int64
	maxInstances int
	maxAssoc     int
	idle         time.Duration
	tokenFile    string
	tlsCert      string
	tlsKey       string
	grace        time.Duration
	sendTo       string
	ignoreSOP    string
}

func runServe(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("serve", "", "Runs midsag as a service. Every instance received is stored durably under\n"+
		"--data-dir before it is acknowledged; a study is scored once nothing has arrived for\n"+
		"--settle, or at once when posted to /v1/studies:score or the gRPC ScoreStudy call.", stderr)
	var f serveFlags
	f.pipelineFlags.register(fs, "add an occlusion map to every result (requests can also ask with explain=true)")
	fs.StringVar(&f.modelsDir, "models-dir", "", "`folder` of extra models (NAME.onnx with manifest), reloaded on change and on SIGHUP")
	fs.StringVar(&f.httpAddr, "http-addr", ":8080", "REST, STOW-RS, health and metrics `address` (empty disables)")
	fs.StringVar(&f.grpcAddr, "grpc-addr", ":9090", "gRPC `address` (empty disables)")
	fs.StringVar(&f.dicomAddr, "dicom-addr", ":11112", "DICOM listener `address` (empty disables)")
	fs.StringVar(&f.aeTitle, "ae-title", "MIDSAG", "our DICOM AE title")
	fs.StringVar(&f.allowAE, "allow-ae", "", "comma-separated calling AE titles allowed to associate (empty allows any)")
	fs.StringVar(&f.dataDir, "data-dir", "./midsag-data", "`folder` of the spool and the results database")
	fs.DurationVar(&f.settle, "settle", 30*time.Second, "score a study once nothing has arrived for this long")
	fs.IntVar(&f.workers, "workers", 1, "studies scored at once")
	fs.IntVar(&f.queue, "queue", 64, "scoring jobs allowed to wait; beyond it requests get 429 / RESOURCE_EXHAUSTED")
	fs.Int64Var(&f.maxBody, "max-body", 1<<30, "largest request body in `bytes`")
	fs.Int64Var(&f.inflight, "inflight-bytes", server.DefaultInflightBytes, "memory in `bytes` for the copy buffers of all instances being received at once (256 KiB each); more wait")
	fs.DurationVar(&f.readIdle, "read-idle", server.DefaultReadIdle, "close an HTTP upload that brings nothing for this long")
	fs.Int64Var(&f.minRate, "min-read-rate", server.DefaultMinRate, "close an HTTP upload bringing fewer `bytes` per second over a --read-idle window (negative: no minimum)")
	fs.IntVar(&f.maxInstances, "max-instances", 5000, "most instances in one study or request")
	fs.IntVar(&f.maxAssoc, "max-associations", 16, "most DICOM associations at once")
	fs.DurationVar(&f.idle, "idle-timeout", 60*time.Second, "close a DICOM association idle for this long")
	fs.StringVar(&f.tokenFile, "token-file", "", "`file` of bearer tokens, one per line; when set, REST and gRPC require one")
	fs.StringVar(&f.tlsCert, "tls-cert", "", "TLS certificate `file` for HTTP and gRPC (with --tls-key)")
	fs.StringVar(&f.tlsKey, "tls-key", "", "TLS key `file`")
	fs.StringVar(&f.sendTo, "send-to", "", "send each result's map back as a DICOM Secondary Capture by C-STORE to `AE@host:port` (implies --explain)")
	fs.StringVar(&f.ignoreSOP, "ignore-sop-class", "", "comma-separated Storage SOP Class `UIDs or keywords` (e.g. CTImageStorage) the DICOM listener acknowledges and drops")
	fs.DurationVar(&f.grace, "shutdown-grace", 30*time.Second, "on SIGTERM, how long running jobs may finish; unfinished ones resume at the next start")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return usagef("serve takes no arguments")
	}
	if (f.tlsCert == "") != (f.tlsKey == "") {
		return usagef("--tls-cert and --tls-key go together")
	}
	if _, err := f.explainFlags.options(); err != nil {
		return err
	}
	if f.sendTo != "" {
		if _, _, err := parseAEAddr(f.sendTo); err != nil {
			return usagef("--send-to: %v", err)
		}
	}
	if _, err := dimse.ParseSOPClasses(f.ignoreSOP); err != nil {
		return usagef("--ignore-sop-class: %v", err)
	}
	log := slog.New(slog.NewJSONHandler(stderr, nil))
	return serve(ctx, &f, log)
}

func readTokens(path string) ([]string, error) {
	if path == "" {
		return nil, nil
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("token file: %w", err)
	}
	var out []string
	for _, line := range strings.Split(string(b), "\n") {
		if t := strings.TrimSpace(line); t != "" && !strings.HasPrefix(t, "#") {
			out = append(out, t)
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("token file %s holds no token", path)
	}
	return out, nil
}

func serve(ctx context.Context, f *serveFlags, log *slog.Logger) error {
	tokens, err := readTokens(f.tokenFile)
	if err != nil {
		return err
	}
	tlsCfg, err := f.tls()
	if err != nil {
		return err
	}
	svc, err := openService(f, log)
	if err != nil {
		return err
	}
	defer svc.close()

	runCtx, stop := context.WithCancel(ctx)
	defer stop()
	ls := &listeners{errs: make(chan error, 4)}
	apiCfg := grpcapi.Config{Backend: svc.core, MaxBodyBytes: f.maxBody, ReadIdle: f.readIdle, MinReadRate: f.minRate,
		Tokens: tokens, Logger: log, Observe: svc.metrics.ObserveRequest}
	if err := ls.startGRPC(f, apiCfg, tlsCfg, log); err != nil {
		ls.shutdown()
		return err
	}
	if err := ls.startHTTP(runCtx, f, apiCfg, svc, tlsCfg, log); err != nil {
		ls.shutdown()
		return err
	}
	if err := ls.startDICOM(runCtx, f, svc, log); err != nil {
		ls.shutdown()
		return err
	}
	stopWatch := watchModels(svc.reg, log)
	defer stopWatch()

	coreDone := make(chan error, 1)
	go func() { coreDone <- svc.core.Run(runCtx, f.grace) }()
	log.Info("midsag serving", "data_dir", f.dataDir, "settle", f.settle.String())
	select {
	case <-ctx.Done():
		log.Info("shutting down")
	case err = <-ls.errs:
		log.Error("listener failed; shutting down", "err", err)
	}
	// Listeners first, so nothing new arrives; then the core, whose
	// running jobs get the grace period.
	ls.shutdown()
	stop()
	cerr := <-coreDone
	ls.wg.Wait()
	log.Info("stopped")
	if err != nil {
		return err
	}
	return cerr
}

// tls loads the certificate of --tls-cert and --tls-key, or returns nil
// without them.
func (f *serveFlags) tls() (*tls.Config, error) {
	if f.tlsCert == "" {
		return nil, nil
	}
	cert, err := tls.LoadX509KeyPair(f.tlsCert, f.tlsKey)
	if err != nil {
		return nil, fmt.Errorf("load TLS certificate: %w", err)
	}
	return &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}, nil
}

// serveParts is what the listeners share: the Core over the store and the
// model registry and the metrics.
type serveParts struct {
	reg     *models.Registry
	st      *store.Store
	core    *server.Core
	metrics *server.Metrics
	// dimse is set once the DICOM listener starts, for the metrics.
	dimse atomic.Pointer[dimse.Server]
}

// openService builds the Pipeline's parts from the flags, then the
// registry (whose default is the Pipeline's model), the store and the
// Core.
func openService(f *serveFlags, log *slog.Logger) (*serveParts, error) {
	cfg, err := f.pipelineFlags.config(models.Options{IntraOpThreads: f.threads})
	if err != nil {
		return nil, err
	}
	// Requests can ask for a map even when --explain is off: the Core
	// holds the explainer and uses it per job.
	explainAll := cfg.Explain || f.sendTo != ""
	cfg.Explain = true
	pipe, def, err := pipeline.New(cfg)
	if err != nil {
		return nil, err
	}
	reg, err := models.NewRegistry(def, f.modelsDir, models.Options{IntraOpThreads: f.threads}, log)
	if err != nil {
		def.Close()
		return nil, err
	}
	st, err := store.Open(f.dataDir, store.Options{MaxInstancesPerStudy: f.maxInstances})
	if err != nil {
		reg.Close()
		return nil, fmt.Errorf("open store: %w", err)
	}
	if err := st.Healthy(); err != nil {
		log.Error("the store's database is damaged: not ready; run midsag store check", "data_dir", f.dataDir, "err", err)
	}
	pre, ok := pipe.Pre.(server.Preprocessor)
	if !ok {
		st.Close()
		reg.Close()
		return nil, fmt.Errorf("preprocessor %T does not read headers alone", pipe.Pre)
	}
	svc := &serveParts{reg: reg, st: st}
	svc.metrics = server.NewMetrics(func() float64 { return float64(svc.core.QueueDepth()) }, svc.associations)
	svc.core = server.New(server.Config{Store: st, Registry: reg, Pre: pre, Explainer: pipe.Explainer,
		Settle: f.settle, Workers: f.workers, QueueSize: f.queue, MaxInstancesPerRequest: f.maxInstances, InflightBytes: f.inflight,
		Logger: log, Metrics: svc.metrics, Explain: explainAll, SendTo: f.sender()})
	return svc, nil
}

// associations counts the DICOM listener's open associations.
func (s *serveParts) associations() float64 {
	if d := s.dimse.Load(); d != nil {
		return float64(d.Stats().Active)
	}
	return 0
}

func (s *serveParts) close() {
	s.st.Close()
	s.reg.Close()
}

// sender returns the C-STORE of --send-to, or nil without it.
func (f *serveFlags) sender() func(context.Context, []byte) error {
	if f.sendTo == "" {
		return nil
	}
	ae, addr, _ := parseAEAddr(f.sendTo)
	client := &dimse.Client{CallingAE: f.aeTitle, CalledAE: ae, Timeout: 30 * time.Second}
	return func(ctx context.Context, part10 []byte) error {
		statuses, err := client.Store(ctx, addr, [][]byte{part10})
		if err != nil {
			return err
		}
		if statuses[0] != 0x0000 && statuses[0]&0xF000 != 0xB000 {
			return fmt.Errorf("C-STORE to %s: status %04X", f.sendTo, statuses[0])
		}
		return nil
	}
}

// listeners runs the network listeners and stops them.
type listeners struct {
	wg   sync.WaitGroup
	errs chan error
	// shutdowns stop the listeners; they run before waiting for them.
	shutdowns []func()
}

// start runs fn in the background; its failure, other than a clean
// stop, goes to errs.
func (ls *listeners) start(name string, fn func() error) {
	ls.wg.Add(1)
	go func() {
		defer ls.wg.Done()
		if err := fn(); err != nil && !errors.Is(err, http.ErrServerClosed) && !errors.Is(err, grpc.ErrServerStopped) {
			ls.errs <- fmt.Errorf("%s: %w", name, err)
		}
	}()
}

func (ls *listeners) shutdown() {
	for _, shutdown := range ls.shutdowns {
		shutdown()
	}
	ls.shutdowns = nil
}

func (ls *listeners) startGRPC(f *serveFlags, apiCfg grpcapi.Config, tlsCfg *tls.Config, log *slog.Logger) error {
	if f.grpcAddr == "" {
		return nil
	}
	var opts []grpc.ServerOption
	if tlsCfg != nil {
		opts = append(opts, grpc.Creds(credentials.NewTLS(tlsCfg)))
	}
	gs, err := grpcapi.NewGRPCServer(apiCfg, opts...)
	if err != nil {
		return err
	}
	l, err := net.Listen("tcp", f.grpcAddr)
	if err != nil {
		return fmt.Errorf("gRPC listener: %w", err)
	}
	log.Info("gRPC listening", "addr", l.Addr().String())
	ls.start("gRPC", func() error { return gs.Serve(l) })
	ls.shutdowns = append(ls.shutdowns, func() {
		stopped := make(chan struct{})
		go func() { gs.GracefulStop(); close(stopped) }()
		select {
		case <-stopped:
		case <-time.After(f.grace):
			gs.Stop()
		}
	})
	return nil
}

func (ls *listeners) startHTTP(ctx context.Context, f *serveFlags, apiCfg grpcapi.Config, svc *serveParts, tlsCfg *tls.Config, log *slog.Logger) error {
	if f.httpAddr == "" {
		return nil
	}
	extra := map[string]http.Handler{
		"/healthz": http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { io.WriteString(w, "ok\n") }),
		"/readyz":  readyHandler(svc.reg, svc.st),
		"/metrics": promhttp.HandlerFor(svc.metrics.Registry, promhttp.HandlerOpts{}),
	}
	h, err := grpcapi.NewHTTPHandler(ctx, apiCfg, extra)
	if err != nil {
		return err
	}
	// Bodies get their own read deadlines (server.NewBody: --read-idle,
	// --min-read-rate); the header and a kept-alive connection waiting for
	// its next request get these.
	hs := &http.Server{Addr: f.httpAddr, Handler: h, TLSConfig: tlsCfg, ReadHeaderTimeout: f.readIdle, IdleTimeout: 2 * f.readIdle}
	l, err := net.Listen("tcp", f.httpAddr)
	if err != nil {
		return fmt.Errorf("HTTP listener: %w", err)
	}
	log.Info("HTTP listening", "addr", l.Addr().String(), "tls", tlsCfg != nil)
	ls.start("HTTP", func() error {
		if tlsCfg != nil {
			return hs.ServeTLS(l, "", "")
		}
		return hs.Serve(l)
	})
	ls.shutdowns = append(ls.shutdowns, func() {
		sctx, cancel := context.WithTimeout(context.Background(), f.grace)
		defer cancel()
		if err := hs.Shutdown(sctx); err != nil {
			hs.Close()
		}
	})
	return nil
}

func (ls *listeners) startDICOM(ctx context.Context, f *serveFlags, svc *serveParts, log *slog.Logger) error {
	if f.dicomAddr == "" {
		return nil
	}
	var allow []string
	for _, a := range strings.Split(f.allowAE, ",") {
		if a = strings.TrimSpace(a); a != "" {
			allow = append(allow, a)
		}
	}
	ignore, _ := dimse.ParseSOPClasses(f.ignoreSOP) // checked in runServe
	dsrv, err := dimse.NewServer(dimse.Config{AETitle: f.aeTitle, AllowedCallingAEs: allow, MaxAssociations: f.maxAssoc,
		IdleTimeout: f.idle, MaxDatasetBytes: f.maxBody, IgnoreSOPClasses: ignore, StatusOf: server.DICOMStatus,
		Logger: log}, storeHandler(svc.core))
	if err != nil {
		return err
	}
	l, err := net.Listen("tcp", f.dicomAddr)
	if err != nil {
		return fmt.Errorf("DICOM listener: %w", err)
	}
	svc.dimse.Store(dsrv)
	log.Info("DICOM listening", "addr", l.Addr().String(), "ae_title", f.aeTitle)
	ls.start("DICOM", func() error { return dsrv.Serve(ctx, l) })
	return nil
}

// watchModels reloads the registry's folder on change and on SIGHUP until
// the returned function is called.
func watchModels(reg *models.Registry, log *slog.Logger) func() {
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	stop := make(chan struct{})
	go reg.Watch(stop, 2*time.Second)
	go func() {
		for {
			select {
			case <-hup:
				log.Info("SIGHUP: reloading models")
				reg.Reload()
			case <-stop:
				return
			}
		}
	}()
	return func() {
		signal.Stop(hup)
		close(stop)
	}
}

// storeHandler answers a C-STORE with success only once the instance is
// durable; a refusal maps to its reason's DIMSE status through
// server.ReasonTable, with the refusal's message as Error Comment, and a
// storage failure to A700 out of resources (PS3.4 B.2.3).
func storeHandler(core *server.Core) dimse.StoreHandler {
	return func(ctx context.Context, a dimse.Association, part10 []byte) dimse.Status {
		_, err := core.Ingest(ctx, server.Origin{Listener: "dicom", CallingAE: a.CallingAE, Remote: a.Remote}, part10)
		switch {
		case err == nil:
			return dimse.Status{Code: dimse.StatusSuccess}
		case isRefusal(err):
			return dimse.Status{Code: server.RefusalStatus(err), Comment: refusalComment(err)}
		default:
			return dimse.Status{Code: dimse.StatusOutOfResources, Comment: "the instance could not be stored"}
		}
	}
}

// refusalComment is the Error Comment of a refusal: its reason code and
// message (reason texts name attributes, not patient data).
func refusalComment(err error) string {
	if e := midsag.RefusalOf(err); e != nil {
		return string(e.Reason) + ": " + e.Msg
	}
	return err.Error()
}

// readyHandler reports ready when the default model is loaded and the
// store passed its integrity check at start and is writable; otherwise
// 503 with the reason in the body.
func readyHandler(reg *models.Registry, st *store.Store) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if _, release, err := reg.Acquire("", ""); err != nil {
			http.Error(w, "model not loaded: "+err.Error(), http.StatusServiceUnavailable)
			return
		} else {
			release()
		}
		ctx, cancel := context.WithTimeout(r.Context(), 5*time.Second)
		defer cancel()
		if err := st.Ping(ctx); err != nil {
			http.Error(w, "store not ready: "+err.Error(), http.StatusServiceUnavailable)
			return
		}
		io.WriteString(w, "ready\n")
	})
}

// parseAEAddr splits "AE@host:port" into the called AE title and the
// address; AE titles are at most 16 characters (PS3.5 6.2, AE).
func parseAEAddr(s string) (string, string, error) {
	ae, addr, ok := strings.Cut(s, "@")
	if !ok || ae == "" || len(ae) > 16 {
		return "", "", fmt.Errorf("%q is not AE@host:port", s)
	}
	if _, _, err := net.SplitHostPort(addr); err != nil {
		return "", "", fmt.Errorf("%q is not AE@host:port: %v", s, err)
	}
	return ae, addr, nil
}
