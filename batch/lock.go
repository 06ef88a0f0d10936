package batch

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

// LockName is the lock a batch run holds on its output folder, so that two
// runs (a resubmitted cluster job, a second terminal) do not both compute
// every group and overwrite each other's results.
const LockName = ".barygrid-batch.lock"

// Lock takes the output folder's lock, or says which process holds it. A lock whose process is gone (same host) is stale and taken over.
func Lock(dir string) (release func(), err error) {
	path := filepath.Join(dir, LockName)
	host, _ := os.Hostname()
	for try := 0; try < 2; try++ {
		f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
		if err == nil {
			fmt.Fprintf(f, "%d %s\n", os.Getpid(), host)
			f.Close()
			return func() { os.Remove(path) }, nil
		}
		if !errors.Is(err, os.ErrExist) {
			return nil, fmt.Errorf("%s: %v", path, pathCause(err))
		}
		data, _ := os.ReadFile(path)
		fields := strings.Fields(string(data))
		pid := 0
		if len(fields) > 0 {
			pid, _ = strconv.Atoi(fields[0])
		}
		holder := host
		if len(fields) > 1 {
			holder = fields[1]
		}
		if pid > 0 && holder == host && !alive(pid) {
			os.Remove(path) // stale: its process is gone
			continue
		}
		return nil, fmt.Errorf("%s is being written by process %d on %s; wait for it, or remove %s if that process is gone", dir, pid, holder, path)
	}
	return nil, fmt.Errorf("%s: could not take the lock %s", dir, path)
}
