// Package fieldfile loads and saves fields by file name: it recognises the
// format from the content (and checks that it agrees with the extension),
// applies the preprocessing every barygrid command shares (inversion,
// background subtraction, pixel size), and writes outputs atomically
// (temporary file in the same folder, then rename) without replacing an
// existing file unless asked.
package fieldfile
