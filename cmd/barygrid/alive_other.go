//go:build !unix

package main

// alive cannot tell here, so a lock is never taken for stale.
func alive(pid int) bool { return true }
