package report

import (
	"bufio"
	"fmt"
	"html/template"
	"io"
)

// Write renders p as one HTML document to w. It draws every plot before
// writing anything, so an error leaves w untouched.
func Write(w io.Writer, p *Page) error {
	if err := p.validate(); err != nil {
		return err
	}
	r, err := newRenderer()
	if err != nil {
		return err
	}
	face, err := r.fontFace()
	if err != nil {
		return err
	}
	v := pageView{Page: p, FontFace: template.CSS(face)}
	for i := range p.Sections {
		s := &p.Sections[i]
		sv := sectionView{Section: s, Anchor: fmt.Sprintf("cert-%d", i+1), StatusClass: s.Status.class(), ClaimHeading: s.Status.claimHeading()}
		for j := range s.Figures {
			f := &s.Figures[j]
			fv := figureView{Figure: f, Anchor: sv.Anchor + "-" + f.ID}
			if f.Plot != nil {
				svg, err := r.svg(f.Plot, f.Title)
				if err != nil {
					return fmt.Errorf("report: %s, figure %s: %w", s.Title, f.ID, err)
				}
				// The SVG is written by gonum's canvas, which escapes
				// every text it draws.
				fv.SVG = template.HTML(svg)
			}
			sv.Figures = append(sv.Figures, fv)
		}
		v.Sections = append(v.Sections, sv)
	}
	bw := bufio.NewWriter(w)
	if err := pageTemplate.Execute(bw, v); err != nil {
		return err
	}
	return bw.Flush()
}

type pageView struct {
	*Page
	FontFace template.CSS
	Sections []sectionView
}

type sectionView struct {
	*Section
	Anchor       string
	StatusClass  string
	ClaimHeading string
	Figures      []figureView
}

type figureView struct {
	*Figure
	Anchor string
	SVG    template.HTML
}

var pageTemplate = template.Must(template.New("page").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<link rel="icon" href="data:,">
<title>{{.Title}}</title>
<style>
{{.FontFace}}
:root{--ink:#1a1a1a;--muted:#555;--rule:#ccc;--ok:#1b6e3a;--audit:#8a5a00;--bad:#a31515}
body{font-family:"Liberation Sans",Arial,Helvetica,sans-serif;color:var(--ink);background:#fff;margin:0 auto;max-width:52rem;padding:1.5rem;line-height:1.45}
h1{font-size:1.6rem;margin:0 0 .5rem}
h2{font-size:1.25rem;margin:0 0 .3rem;overflow-wrap:anywhere}
h3{font-size:1rem;margin:1.1rem 0 .3rem}
nav ul{padding-left:1.2rem}
section.cert{border-top:3px solid var(--rule);margin-top:2rem;padding-top:1rem}
section.checked{border-top-color:var(--ok)}
section.audited,section.partial{border-top-color:var(--audit)}
section.failed{border-top-color:var(--bad)}
.status{display:inline-block;font-weight:bold;font-size:.85rem;padding:.1rem .5rem;border:1.5px solid;border-radius:.25rem;margin-right:.4rem}
.checked .status{color:var(--ok)}
.audited .status,.partial .status{color:var(--audit)}
.failed .status{color:var(--bad)}
.verdict{margin:.4rem 0}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:.15rem 1rem;margin:.6rem 0}
dl.facts dt{color:var(--muted)}
dl.facts dd{margin:0;overflow-wrap:anywhere}
code,.root{font-family:"Liberation Mono","DejaVu Sans Mono",monospace;font-size:.9em;overflow-wrap:anywhere}
.claim{margin:.3rem 0}
.caution{margin:.3rem 0;padding:.4rem .7rem;border-left:4px solid var(--audit);background:#fbf6ea}
.failure{padding:.4rem .7rem;border-left:4px solid var(--bad);background:#fbeaea}
figure{margin:1.4rem 0}
figcaption{margin-bottom:.4rem}
figcaption b{display:block}
figure svg{display:block;width:100%;max-width:40rem;height:auto}
details{margin-top:.3rem}
summary{cursor:pointer;color:var(--muted)}
table{border-collapse:collapse;margin:.4rem 0;font-size:.9rem}
th,td{border-bottom:1px solid var(--rule);padding:.15rem .6rem;text-align:right;vertical-align:top}
th{border-bottom:1.5px solid var(--ink)}
td:first-child,th:first-child{text-align:left}
td{overflow-wrap:anywhere}
@media print{
  body{max-width:none;padding:0;font-size:10pt}
  nav{display:none}
  section.cert{break-before:page;margin-top:0}
  figure{break-inside:avoid}
  details::details-content{content-visibility:visible;display:contents}
  summary{display:none}
}
</style>
</head>
<body>
<header>
<h1>{{.Title}}</h1>
{{range .Intro}}<p>{{.}}</p>
{{end}}{{if gt (len .Sections) 1}}<nav><ul>
{{range .Sections}}<li><a href="#{{.Anchor}}">{{.Title}}</a>: {{.Kind}}, {{.Status}}</li>
{{end}}</ul></nav>{{end}}
</header>
{{range .Sections}}<section class="cert {{.StatusClass}}" id="{{.Anchor}}" data-kind="{{.Kind}}" data-title="{{.Title}}">
<h2>{{.Title}}</h2>
<p class="verdict"><span class="status">{{.Status}}</span>{{.Verdict}}</p>
<dl class="facts">
{{if .Root}}<dt>root</dt><dd class="root">{{.Root}}</dd>
{{end}}{{range .Facts}}<dt>{{.Label}}</dt><dd>{{.Value}}</dd>
{{end}}</dl>
{{with .Failure}}<div class="failure"><p><b>{{.Reason}}</b>: {{.Message}}</p>{{if .Where}}
<dl class="facts">{{range .Where}}<dt>{{.Label}}</dt><dd>{{.Value}}</dd>{{end}}</dl>{{end}}</div>
{{end}}{{if .Claim}}<h3>{{.ClaimHeading}}</h3>
<p class="claim">{{.Claim}}</p>
{{end}}{{if .Caution}}<h3>What it does not prove</h3>
<p class="caution">{{.Caution}}</p>
{{end}}{{range .Notes}}<p class="note">{{.}}</p>
{{end}}{{range .Figures}}<figure id="{{.Anchor}}" data-figure="{{.ID}}">
<figcaption><b>{{.Title}}</b>{{.Caption}}</figcaption>
{{if .SVG}}{{.SVG}}<details>
<summary>The numbers behind this plot</summary>
{{template "table" .Table}}</details>
{{else}}{{template "table" .Table}}{{end}}</figure>
{{end}}</section>
{{end}}</body>
</html>
{{define "table"}}{{if .Rows}}<table>
<thead><tr>{{range .Columns}}<th>{{.}}</th>{{end}}</tr></thead>
<tbody>
{{range .Rows}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>
{{end}}</tbody>
</table>
{{else}}<p class="none">none</p>
{{end}}{{end}}`))
