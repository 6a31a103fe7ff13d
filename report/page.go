package report

import (
	"fmt"
	"html/template"
	"os"
	"path/filepath"
)

// Figure is one image on the HTML page.
type Figure struct {
	File    string // relative to the page
	Caption string
}

// Setting is one row of a name and value table.
type Setting struct{ Name, Value string }

// Table is a table of figures with a caption, such as the results per
// fault kind.
type Table struct {
	Caption string
	Header  []string
	Rows    [][]string
}

var page = template.Must(template.New("page").Parse(`<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<link rel="icon" href="data:,">
<title>{{.Title}}</title>
<style>
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;font-size:17px;line-height:1.5;max-width:1400px;margin:1.5em auto;padding:0 1.5em;color:#1a1a1a}
h1{font-size:1.7em;margin-bottom:.2em}h2{font-size:1.25em;margin-top:1.6em;border-bottom:1px solid #ddd}
.meta{color:#555;margin-top:0}
table{border-collapse:collapse;margin:.5em 0}th,td{padding:4px 14px;border-bottom:1px solid #ddd;text-align:left}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}
caption{text-align:left;font-weight:600;padding-bottom:.3em}
figure{margin:1.5em 0}img{width:100%;height:auto;border:1px solid #eee}
figcaption{color:#444;margin-top:.3em}
.caution{background:#fff4e5;border-left:4px solid #e69f00;padding:.6em 1em}
</style></head><body>
<h1>{{.Title}}</h1>
<p class="meta">{{if .Generated}}Written {{.Generated}}{{end}}{{if .Version}} by quern {{.Version}}{{end}}{{if .RunTime}}; the run took {{.RunTime}}{{end}}.</p>
{{if .Caution}}<p class="caution">{{.Caution}}</p>{{end}}
{{range .Paragraphs}}<p>{{.}}</p>{{end}}
{{if .Summary}}<h2>Results</h2>
<table>{{range .Summary}}<tr><th>{{.Name}}</th><td class="num">{{.Value}}</td></tr>{{end}}</table>{{end}}
{{range .Tables}}<table>{{if .Caption}}<caption>{{.Caption}}</caption>{{end}}
<tr>{{range .Header}}<th>{{.}}</th>{{end}}</tr>
{{range .Rows}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>{{end}}</table>{{end}}
{{range .Figures}}<figure><img src="{{.File}}" alt="{{.Caption}}"><figcaption>{{.Caption}}</figcaption></figure>{{end}}
{{if .Settings}}<h2>Settings</h2>
<table>{{range .Settings}}<tr><th>{{.Name}}</th><td>{{.Value}}</td></tr>{{end}}</table>{{end}}
</body></html>
`))

// Page is the HTML report tying figures, results and settings together.
type Page struct {
	Title   string
	Caution string
	// Generated, Version and RunTime head the page: when it was written,
	// by which quern, and how long the run took (each may be empty).
	Generated, Version, RunTime string
	Paragraphs                  []string
	// Summary holds the run's numbers: final losses, the threshold, the
	// best epoch, the rows used.
	Summary  []Setting
	Tables   []Table
	Figures  []Figure
	Settings []Setting
}

// Write renders the page to dir/index.html.
func (pg Page) Write(dir string) error {
	f, err := os.Create(filepath.Join(dir, "index.html"))
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := page.Execute(f, pg); err != nil {
		f.Close()
		return fmt.Errorf("report: %w", err)
	}
	return f.Close()
}
