package preprocess

import (
	"runtime"

	"golang.org/x/sync/errgroup"
)

// eachIndex calls f(0) … f(n-1) on up to GOMAXPROCS goroutines and
// returns the first error. Each call must touch only its own index's
// data, so the result does not depend on the order the calls run in.
func eachIndex(n int, f func(i int) error) error {
	if n < 2 || runtime.GOMAXPROCS(0) < 2 {
		for i := range n {
			if err := f(i); err != nil {
				return err
			}
		}
		return nil
	}
	var g errgroup.Group
	g.SetLimit(runtime.GOMAXPROCS(0))
	for i := range n {
		g.Go(func() error { return f(i) })
	}
	return g.Wait()
}
