// Package batch averages folders of groups: it discovers the groups
// (subfolders, or a manifest of group,file[,weight] rows), selects a shard
// of them for cluster array jobs, computes each group's barycenter, pixel
// mean and Gaussian barycenter with their pictures and report into
// OUT/GROUP (built in a temporary folder and renamed into place, so a
// failure leaves nothing partial), skips groups whose inputs and settings
// are unchanged, and writes a summary. A lock on the output folder keeps two
// runs from computing the same groups.
package batch
