package batch

import (
	"runtime"
	"sync"

	"barygrid/internal/parallel"
	"barygrid/sinkhorn"
)

// RunSettings of Run. The zero value runs as many groups at once as there
// are CPUs, without a memory bound.
type RunSettings struct {
	// Jobs bounds the groups computed at once; zero means the CPUs.
	Jobs int
	// Memory, when positive, bounds the estimated memory of the groups
	// computed at once, in bytes (sinkhorn.MemoryEstimate of the largest).
	Memory float64
	// Done, when set, is called after each group (from several goroutines
	// one at a time is not promised: guard what it shares).
	Done func(Row)
}

// Run processes the groups into job.Out, several at once, and returns one
// row per group in their order. The CPUs are shared: each group's solver
// gets CPUs / jobs workers.
func Run(groups []Group, job Job, s RunSettings) []Row {
	cpus := runtime.GOMAXPROCS(0)
	jobs := s.Jobs
	if jobs <= 0 {
		jobs = cpus
	}
	var worst float64
	for _, g := range groups {
		worst = max(worst, float64(len(g.Files)))
	}
	if s.Memory > 0 && worst > 0 {
		if px := firstPixels(groups); px > 0 {
			jobs = max(1, min(jobs, int(s.Memory/sinkhorn.MemoryEstimate(int(worst), 1, px))))
		}
	}
	rows := make([]Row, len(groups))
	var mu sync.Mutex
	parallel.For(len(groups), jobs, func(i int) {
		jb := job
		jb.Solver.Workers = max(1, cpus/jobs)
		row := Process(groups[i], jb)
		mu.Lock()
		rows[i] = row
		// The results page shows progress during a long run; a page that
		// cannot be written is not a group's failure.
		_ = WriteIndex(job.Out, rows)
		mu.Unlock()
		if s.Done != nil {
			s.Done(row)
		}
	})
	return rows
}
