package phantom

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"sync"

	"github.com/midsag/midsag/internal/atomicfile"
)

// Generate writes opts.Studies studies under dir as dir/study-NNNN/...,
// plus dir/labels.csv (study_instance_uid,label with label 1 for cord
// compression) and dir/truth.json (the StudyTruth of every study). Every
// file is written to a temporary name and renamed, so a reader never sees
// a partial file. Studies are generated in parallel on all CPUs; the
// output does not depend on how many.
func Generate(dir string, opts Options) ([]StudyTruth, error) {
	return GenerateContext(context.Background(), dir, opts)
}

// GenerateContext is Generate that stops handing out studies once ctx is
// done and returns ctx's error; studies already written stay whole, and
// labels.csv and truth.json are written only for a complete run.
func GenerateContext(ctx context.Context, dir string, opts Options) ([]StudyTruth, error) {
	if opts.Studies < 0 {
		return nil, fmt.Errorf("generate: %d studies", opts.Studies)
	}
	if _, err := opts.syntaxes(); err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	if _, err := opts.compressionRate(); err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	truths := make([]StudyTruth, opts.Studies)
	errs := make([]error, opts.Studies)
	next := make(chan int)
	var wg sync.WaitGroup
	for w := 0; w < min(runtime.GOMAXPROCS(0), max(opts.Studies, 1)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				truths[i], errs[i] = writeStudy(dir, opts, i)
			}
		}()
	}
feed:
	for i := 0; i < opts.Studies; i++ {
		select {
		case next <- i:
		case <-ctx.Done():
			break feed
		}
	}
	close(next)
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	for _, err := range errs {
		if err != nil {
			return nil, fmt.Errorf("generate: %w", err)
		}
	}

	var labels bytes.Buffer
	cw := csv.NewWriter(&labels)
	rows := [][]string{{"study_instance_uid", "label"}}
	for _, t := range truths {
		label := "0"
		if t.Compression {
			label = "1"
		}
		rows = append(rows, []string{t.StudyInstanceUID, label})
	}
	if err := cw.WriteAll(rows); err != nil {
		return nil, fmt.Errorf("generate: labels: %w", err)
	}
	if err := atomicfile.WriteFile(filepath.Join(dir, "labels.csv"), labels.Bytes()); err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	js, err := json.MarshalIndent(truths, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("generate: truth: %w", err)
	}
	if err := atomicfile.WriteFile(filepath.Join(dir, "truth.json"), append(js, '\n')); err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	return truths, nil
}

func writeStudy(dir string, opts Options, index int) (StudyTruth, error) {
	files, truth, err := GenerateStudy(opts, index)
	if err != nil {
		return truth, err
	}
	// Each file is synced as it is written; each folder once, after its
	// files, rather than once per file.
	folders := map[string]bool{}
	for _, f := range files {
		p := filepath.Join(dir, filepath.FromSlash(f.Name))
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			return truth, fmt.Errorf("study %d: %w", index, err)
		}
		if err := atomicfile.WriteFile(p, f.Data, atomicfile.SkipDirSync()); err != nil {
			return truth, fmt.Errorf("study %d: %w", index, err)
		}
		folders[filepath.Dir(p)] = true
	}
	for d := range folders {
		if err := atomicfile.SyncDir(d); err != nil {
			return truth, fmt.Errorf("study %d: %w", index, err)
		}
	}
	return truth, nil
}
