// Package parallel is barygrid's one helper for running independent
// tasks on several goroutines with results that do not depend on how many.
package parallel
