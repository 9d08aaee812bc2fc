package models

import (
	"cmp"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/midsag/midsag"
)

// Registry holds the models a service can run: a default model and every
// NAME.onnx (with its manifest) in a folder. Reload picks up added,
// changed and removed files without disturbing requests in flight: a
// replaced model is closed only when the last caller that acquired it has
// released it. It is safe for concurrent use.
//
// Models are ordered by name, then version (compareVersions), then file
// path; List returns them in that order after the default model, and the
// newest version of a name is the last of its name in that order.
type Registry struct {
	dir  string
	opts Options
	log  *slog.Logger

	// reload serialises Reload: two scans at once would both load a
	// changed file and the second would replace the first's model
	// without retiring it.
	reload sync.Mutex

	mu      sync.Mutex
	def     *entry
	byFile  map[string]*entry
	closed  bool
	lastErr map[string]string
}

// entry is one loaded model with its reference count.
type entry struct {
	m       *Model
	path    string
	modTime time.Time
	size    int64
	refs    int
	retired bool
}

// RegistryEntry describes one model of the registry.
type RegistryEntry struct {
	Info     midsag.ModelInfo
	Manifest *Manifest
	// Path is the model file, or "" for the default model given as bytes.
	Path    string
	Default bool
}

// NewRegistry returns a registry whose default model is def and which
// loads the models in dir ("" for none). def is owned by the registry
// from then on.
func NewRegistry(def *Model, dir string, opts Options, log *slog.Logger) (*Registry, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	r := &Registry{dir: dir, opts: opts, log: log, def: &entry{m: def}, byFile: map[string]*entry{}, lastErr: map[string]string{}}
	if dir != "" {
		if st, err := os.Stat(dir); err != nil || !st.IsDir() {
			return nil, fmt.Errorf("models folder %s: not a readable folder", dir)
		}
	}
	r.Reload()
	return r, nil
}

// Reload rescans the folder: new and changed files are loaded, removed
// ones retired. A file that fails to load is logged and skipped, and a
// previously loaded version of it stays in service.
func (r *Registry) Reload() {
	if r.dir == "" {
		return
	}
	r.reload.Lock()
	defer r.reload.Unlock()
	paths, err := filepath.Glob(filepath.Join(r.dir, "*.onnx"))
	if err != nil {
		r.log.Error("scan models folder", "dir", r.dir, "err", err)
		return
	}
	seen := map[string]bool{}
	for _, p := range paths {
		seen[p] = true
		st, err := os.Stat(p)
		if err != nil {
			continue
		}
		modTime, size := st.ModTime(), st.Size()
		if sc, err := os.Stat(SidecarPath(p)); err == nil && sc.ModTime().After(modTime) {
			modTime = sc.ModTime()
		}
		r.mu.Lock()
		cur := r.byFile[p]
		r.mu.Unlock()
		if cur != nil && cur.modTime.Equal(modTime) && cur.size == size {
			continue
		}
		m, err := Load(p, r.opts)
		if err != nil {
			msg := err.Error()
			r.mu.Lock()
			repeated := r.lastErr[p] == msg
			r.lastErr[p] = msg
			r.mu.Unlock()
			if !repeated {
				r.log.Error("model not loaded", "file", filepath.Base(p), "err", msg)
			}
			continue
		}
		r.mu.Lock()
		delete(r.lastErr, p)
		if r.closed {
			r.mu.Unlock()
			m.Close()
			return
		}
		r.byFile[p] = &entry{m: m, path: p, modTime: modTime, size: size}
		if cur != nil {
			r.retire(cur)
		}
		r.mu.Unlock()
		info := m.Info()
		r.log.Info("model loaded", "file", filepath.Base(p), "name", info.Name, "version", info.Version, "sha256", info.SHA256)
	}
	r.mu.Lock()
	for p, e := range r.byFile {
		if !seen[p] {
			delete(r.byFile, p)
			r.retire(e)
			r.log.Info("model removed", "file", filepath.Base(p))
		}
	}
	r.mu.Unlock()
}

// retire marks e out of service and closes it once unused; r.mu is held.
func (r *Registry) retire(e *entry) {
	e.retired = true
	if e.refs == 0 {
		e.m.Close()
	}
}

// Acquire returns the model with the given name and version ("" for the
// default model; an empty version takes the newest loaded version of the
// name, by compareVersions) and a release function the caller must call
// when done.
func (r *Registry) Acquire(name, version string) (midsag.Model, func(), error) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.closed {
		return nil, nil, errors.New("model registry is closed")
	}
	e := r.find(name, version)
	if e == nil {
		return nil, nil, midsag.Rejectf(midsag.ReasonUnknownModel, "no model named %q%s; available: %s",
			name, versionSuffix(version), strings.Join(r.namesLocked(), ", "))
	}
	e.refs++
	var once sync.Once
	return e.m, func() {
		once.Do(func() {
			r.mu.Lock()
			defer r.mu.Unlock()
			e.refs--
			if e.retired && e.refs == 0 {
				e.m.Close()
			}
		})
	}, nil
}

func versionSuffix(v string) string {
	if v == "" {
		return ""
	}
	return " version " + v
}

// find returns the entry of name and version; an empty version finds the
// newest. Among equal versions the default model, then the first file
// path, wins. r.mu is held.
func (r *Registry) find(name, version string) *entry {
	if name == "" && version == "" {
		return r.def
	}
	var best *entry
	for _, e := range r.all() {
		info := e.m.Info()
		if info.Name != name || (version != "" && info.Version != version) {
			continue
		}
		if best == nil || compareVersions(info.Version, best.m.Info().Version) > 0 {
			best = e
		}
	}
	return best
}

// all returns the default entry, then the folder's entries by name,
// version and path; r.mu is held.
func (r *Registry) all() []*entry {
	folder := make([]*entry, 0, len(r.byFile))
	for _, e := range r.byFile {
		folder = append(folder, e)
	}
	sort.Slice(folder, func(i, j int) bool {
		a, b := folder[i].m.Info(), folder[j].m.Info()
		if a.Name != b.Name {
			return a.Name < b.Name
		}
		if c := compareVersions(a.Version, b.Version); c != 0 {
			return c < 0
		}
		return folder[i].path < folder[j].path
	})
	return append([]*entry{r.def}, folder...)
}

// compareVersions orders manifest versions: a leading "v" is dropped,
// the rest split at dots, and the parts compared in turn, numerically
// when both are decimal numbers and as strings otherwise; a version that
// is a prefix of another sorts first. So "9" < "10", "1.9" < "1.10" and
// "1.2" < "1.2.1" (the precedence of dotted numbers in Semantic
// Versioning 2.0.0 item 11, without its pre-release rules).
func compareVersions(a, b string) int {
	pa := strings.Split(strings.TrimPrefix(a, "v"), ".")
	pb := strings.Split(strings.TrimPrefix(b, "v"), ".")
	for i := 0; i < len(pa) && i < len(pb); i++ {
		na, ea := strconv.ParseUint(pa[i], 10, 64)
		nb, eb := strconv.ParseUint(pb[i], 10, 64)
		var c int
		if ea == nil && eb == nil {
			c = cmp.Compare(na, nb)
		} else {
			c = strings.Compare(pa[i], pb[i])
		}
		if c != 0 {
			return c
		}
	}
	return cmp.Compare(len(pa), len(pb))
}

func (r *Registry) namesLocked() []string {
	var names []string
	for _, e := range r.all() {
		names = append(names, e.m.Info().Name+" "+e.m.Info().Version)
	}
	return names
}

// List describes every model in service: the default first, then by
// name, version and file path.
func (r *Registry) List() []RegistryEntry {
	r.mu.Lock()
	defer r.mu.Unlock()
	var out []RegistryEntry
	for _, e := range r.all() {
		out = append(out, RegistryEntry{Info: e.m.Info(), Manifest: e.m.Manifest(), Path: e.path, Default: e == r.def})
	}
	return out
}

// Watch reloads the folder every interval until stop is closed; file
// changes are noticed by modification time and size.
func (r *Registry) Watch(stop <-chan struct{}, interval time.Duration) {
	if r.dir == "" {
		return
	}
	t := time.NewTicker(interval)
	defer t.Stop()
	for {
		select {
		case <-stop:
			return
		case <-t.C:
			r.Reload()
		}
	}
}

// Close retires every model; each closes once its last user releases it.
func (r *Registry) Close() {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.closed {
		return
	}
	r.closed = true
	for _, e := range r.all() {
		r.retire(e)
	}
}
