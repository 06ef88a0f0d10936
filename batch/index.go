package batch

import (
	"fmt"
	"html/template"
	"io"
	"os"
	"path/filepath"
	"sort"

	"barygrid/io/fieldfile"
)

// IndexName is the results page a batch writes beside summary.csv.
const IndexName = "index.html"

// pageTmpl is one static page: no scripts, no styles or files from
// elsewhere, only links relative to the output folder, so that it opens
// from the folder (or a copy of it) in any browser.
var pageTmpl = template.Must(template.New("index").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>barygrid batch: {{len .Rows}} groups</title>
<style>
body { font-family: sans-serif; margin: 1.5em; background: #fafafa; color: #222; }
table { border-collapse: collapse; margin-bottom: 1.5em; }
th, td { border: 1px solid #ccc; padding: 0.3em 0.6em; text-align: left; vertical-align: top; }
tr.failed td { background: #fde8e8; }
.group { margin: 1em 0 2em; }
.group img { max-height: 180px; margin-right: 1em; border: 1px solid #ccc; }
</style>
</head>
<body>
<h1>barygrid batch</h1>
<p>{{.Done}} of {{.Total}} groups done, {{.Failed}} failed{{if lt .Done .Total}} (still running: this page is rewritten after every group){{end}}.</p>
<table>
<tr><th>group</th><th>status</th><th>inputs</th><th>iterations</th><th>seconds</th><th>residual</th><th>message</th></tr>
{{range .Rows}}<tr class="{{.Status}}"><td>{{if .Linked}}<a href="#{{.Group}}">{{.Group}}</a>{{else}}{{.Group}}{{end}}</td><td>{{.Status}}</td><td>{{.Inputs}}</td><td>{{.Iterations}}</td><td>{{printf "%.2f" .Seconds}}</td><td>{{printf "%.3g" .Residual}}</td><td>{{.Message}}</td></tr>
{{end}}</table>
{{range .Rows}}{{if .Linked}}<div class="group" id="{{.Group}}">
<h2>{{.Group}}</h2>
{{range .Pictures}}<a href="{{.}}"><img src="{{.}}" alt="{{.}}"></a>{{end}}
<p>{{range .Files}}<a href="{{.}}">{{.}}</a> {{end}}</p>
</div>
{{end}}{{end}}</body>
</html>
`))

type pageRow struct {
	Row
	Linked          bool
	Pictures, Files []string
}

// WriteIndex writes out/index.html for the rows (groups not yet done have
// an empty Status): failures first, then the others in their order; each
// finished group with its contact sheet and convergence plot as thumbnails
// linking to the full pictures, its outputs and its report. It is written
// atomically, so that a reader never sees half a page.
func WriteIndex(out string, rows []Row) error {
	page := struct {
		Rows                []pageRow
		Done, Total, Failed int
	}{Total: len(rows)}
	for _, r := range rows {
		if r.Status == "" {
			continue
		}
		page.Done++
		pr := pageRow{Row: r}
		if r.Status == "failed" {
			page.Failed++
		} else {
			for _, f := range Outputs {
				rel := r.Group + "/" + f
				if _, err := os.Stat(filepath.Join(out, r.Group, f)); err != nil {
					continue
				}
				if f == "contact_sheet.png" || f == "convergence.png" {
					pr.Pictures = append(pr.Pictures, rel)
				} else {
					pr.Files = append(pr.Files, rel)
				}
				pr.Linked = true
			}
		}
		page.Rows = append(page.Rows, pr)
	}
	sort.SliceStable(page.Rows, func(i, j int) bool {
		return page.Rows[i].Status == "failed" && page.Rows[j].Status != "failed"
	})
	err := fieldfile.WriteAtomic(filepath.Join(out, IndexName), true, func(w io.Writer) error {
		return pageTmpl.Execute(w, page)
	})
	if err != nil {
		return fmt.Errorf("batch: %w", err)
	}
	return nil
}
