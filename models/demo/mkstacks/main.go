// Command mkstacks writes training stacks for the demo model: it generates
// phantom studies, runs midsag's own preprocessing on each (the same steps
// Pipeline runs) and writes the input tensors and labels as raw files that
// models/demo/train.py reads. It is a development tool, not part of CI.
package main

import (
	"bytes"
	"context"
	"encoding/binary"
	"flag"
	"fmt"
	"log"
	"os"
	"path/filepath"
	"runtime"
	"sync"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
)

func main() {
	out := flag.String("out", "", "output folder")
	studies := flag.Int("studies", 600, "number of phantom studies")
	seed := flag.Int64("seed", 11, "phantom seed")
	manifest := flag.String("manifest", "models/demo/manifest.json", "manifest whose input spec to build")
	flag.Parse()
	if *out == "" {
		log.Fatal("mkstacks: -out is required")
	}
	raw, err := os.ReadFile(*manifest)
	if err != nil {
		log.Fatal(err)
	}
	man, err := models.ParseManifest(raw)
	if err != nil {
		log.Fatal(err)
	}
	spec := man.InputSpec()
	per := spec.Slices * spec.Height * spec.Width
	x := make([]float32, *studies*per)
	y := make([]byte, *studies)
	pre := preprocess.New(preprocess.Options{})
	opts := phantom.Options{Studies: *studies, Seed: *seed, NoDecoys: true}
	var wg sync.WaitGroup
	work := make(chan int)
	errs := make(chan error, *studies)
	for w := 0; w < runtime.NumCPU(); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range work {
				files, truth, err := phantom.GenerateStudy(opts, i)
				if err != nil {
					errs <- err
					continue
				}
				var insts []*midsag.Instance
				for _, f := range files {
					in, err := pre.Read(f.Name, bytes.NewReader(f.Data))
					if err != nil {
						errs <- fmt.Errorf("study %d: %w", i, err)
						continue
					}
					insts = append(insts, in)
				}
				prep, err := pre.Prepare(context.Background(), insts, spec)
				if err != nil {
					errs <- fmt.Errorf("study %d: %w", i, err)
					continue
				}
				copy(x[i*per:], prep.Input.Data)
				if truth.Compression {
					y[i] = 1
				}
			}
		}()
	}
	for i := 0; i < *studies; i++ {
		work <- i
	}
	close(work)
	wg.Wait()
	close(errs)
	for err := range errs {
		log.Fatal(err)
	}
	if err := os.MkdirAll(*out, 0o755); err != nil {
		log.Fatal(err)
	}
	var b bytes.Buffer
	if err := binary.Write(&b, binary.LittleEndian, x); err != nil {
		log.Fatal(err)
	}
	must(os.WriteFile(filepath.Join(*out, "x.f32"), b.Bytes(), 0o644))
	must(os.WriteFile(filepath.Join(*out, "y.u8"), y, 0o644))
	must(os.WriteFile(filepath.Join(*out, "shape.txt"), []byte(fmt.Sprintf("%d %d %d %d\n", *studies, spec.Slices, spec.Height, spec.Width)), 0o644))
	fmt.Printf("wrote %d stacks of %dx%dx%d to %s\n", *studies, spec.Slices, spec.Height, spec.Width, *out)
}

func must(err error) {
	if err != nil {
		log.Fatal(err)
	}
}
