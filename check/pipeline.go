package check

import (
	"runtime"
	"sync"

	"descent/check/kernel"
)

// pipeline runs the kernel's work on records on several workers at once
// and hands the results to the kernel in the order of the records, so
// that the failure reported is always the first one in the file, whatever
// the number of workers (kernel.Fast.Run).
func pipeline(workers int) func(n int, work func(int) (*kernel.Tally, *kernel.Failure), take func(*kernel.Tally)) *kernel.Failure {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	return func(n int, work func(int) (*kernel.Tally, *kernel.Failure), take func(*kernel.Tally)) *kernel.Failure {
		type result struct {
			t  *kernel.Tally
			fl *kernel.Failure
		}
		type job struct {
			i   int
			out chan result
		}
		jobs := make(chan job)
		queue := make(chan chan result, 4*workers) // the results to take, in order
		stop := make(chan struct{})
		var wg sync.WaitGroup
		for range workers {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for jb := range jobs {
					t, fl := work(jb.i)
					jb.out <- result{t, fl}
				}
			}()
		}
		go func() {
			defer close(jobs)
			defer close(queue)
			for i := range n {
				out := make(chan result, 1)
				select {
				case queue <- out:
				case <-stop:
					return
				}
				jobs <- job{i, out} // workers run until jobs closes: never blocks for good
			}
		}()
		var first *kernel.Failure
		for out := range queue {
			r := <-out
			if first == nil && r.fl != nil {
				first = r.fl
				close(stop)
			}
			if first == nil {
				take(r.t)
			}
		}
		wg.Wait()
		return first
	}
}
