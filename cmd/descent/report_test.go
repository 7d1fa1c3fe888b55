package main

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"image"
	"image/png"
	"math/big"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/network"
	"github.com/chromedp/chromedp"
	"github.com/stretchr/testify/require"
	"golang.org/x/crypto/blake2b"

	"descent/cert"
)

// chromiumPath is Debian's chromium; .ci/run installs it when missing.
const chromiumPath = "/usr/bin/chromium"

// browser starts headless Chromium with a fresh profile and every
// background service off, and DNS mapped to nowhere, so that a request the
// page makes fails here instead of leaving the machine; the test still
// sees it among the network events.
func browser(t *testing.T) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		t.Fatalf("this test renders the report in headless Chromium, expected at %s: %v\n"+
			"hint: install Debian's package: apt-get install chromium (.ci/run does so when it is missing)", chromiumPath, err)
	}
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(chromiumPath),
		chromedp.Flag("headless", true),
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.Flag("disable-quic", true),
		chromedp.NoFirstRun,
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("host-resolver-rules", "MAP * ~NOTFOUND"),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1000, 1400),
	}
	allocCtx, cancelAlloc := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancel := chromedp.NewContext(allocCtx)
	// Cleanups run last-in first-out: the browser exits before its
	// profile directory is removed.
	t.Cleanup(func() { cancel(); cancelAlloc() })
	// The first action starts the browser, whose life is that of ctx.
	_, err := chromedp.Run(ctx, chromedp.Evaluate[bool](`true`))
	require.NoError(t, err, "start Chromium")
	return ctx
}

// load opens the page at path and returns every URL the page requested
// other than the page itself and data: URLs, which are inside it.
func load(t *testing.T, ctx context.Context, path string) []string {
	t.Helper()
	page := (&url.URL{Scheme: "file", Path: path}).String()
	var mu sync.Mutex
	var outside []string
	lctx, stop := context.WithCancel(ctx)
	defer stop()
	// The target has the network domain enabled from its start; Listen
	// sees each request before the navigation that causes it returns.
	require.NoError(t, chromedp.Listen(lctx, func(ev any) {
		if e, ok := ev.(*network.EventRequestWillBeSent); ok {
			u := e.Request.URL
			if u != page && !strings.HasPrefix(u, "data:") {
				mu.Lock()
				outside = append(outside, u)
				mu.Unlock()
			}
		}
	}))
	actx, cancel := context.WithTimeout(ctx, time.Minute)
	defer cancel()
	require.NoError(t, chromedp.Do(actx, chromedp.Navigate(page)))
	fontsLoaded, err := chromedp.Run(actx, chromedp.Evaluate[bool](`document.fonts.ready.then(() => true)`, chromedp.EvalAwaitPromise))
	require.NoError(t, err)
	require.True(t, fontsLoaded)
	mu.Lock()
	defer mu.Unlock()
	return append([]string(nil), outside...)
}

// domSection is what the rendered page shows of one certificate.
type domSection struct {
	Title, Kind, Class, Root string
	Embedded                 bool                  // the plots' font is the page's own, loaded
	Tables                   map[string][][]string // by figure id: rows of cells
	SVGs                     int
}

const readDOM = `[...document.querySelectorAll('section.cert')].map(s => ({
	Title: s.dataset.title, Kind: s.dataset.kind, Class: s.className,
	Root: (s.querySelector('dd.root') || {}).textContent || '',
	Embedded: [...document.fonts].some(f => f.family.replace(/"/g, '') === 'Liberation Sans' && f.status === 'loaded'),
	SVGs: s.querySelectorAll('svg').length,
	Tables: Object.fromEntries([...s.querySelectorAll('figure')].map(f =>
		[f.dataset.figure, [...f.querySelectorAll('tbody tr')].map(tr => [...tr.cells].map(td => td.textContent))])),
}))`

// checkJSONLines runs 'descent check -json' and returns one report per file.
func checkJSONLines(t *testing.T, args ...string) []map[string]any {
	t.Helper()
	_, stdout, stderr := runCLI(append([]string{"check", "-json"}, args...)...)
	var reps []map[string]any
	for _, line := range strings.Split(strings.TrimSpace(stdout), "\n") {
		var rep map[string]any
		require.NoError(t, json.Unmarshal([]byte(line), &rep), "%s\n%s", line, stderr)
		reps = append(reps, rep)
	}
	return reps
}

// jsonNum writes a number of check -json as the decimal the page shows.
func jsonText(v any) string {
	switch x := v.(type) {
	case float64:
		return strconv.FormatFloat(x, 'f', -1, 64)
	case string:
		return x
	}
	return fmt.Sprint(v)
}

// TestReportInBrowser renders the report of real certificates in headless
// Chromium: the page loads with no request leaving it, the screenshot is
// not blank, and the numbers in the rendered DOM are those of
// 'descent check -json' on the same files and of the OEIS.
func TestReportInBrowser(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a browser; run without -short")
	}
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "20", "-o", p("s20.dcert")},
		{"emit", "sieve", "-k", "12", "-map", "3n-1", "-o", p("m12.dcert")},
		{"emit", "sieve", "-k", "12", "-o", p("s12.dcert")},
		{"emit", "range", "-sieve", p("s12.dcert"), "-from", "1", "-to", "2^20", "-o", p("r.dcert")},
		{"report", "-sieve", p("s12.dcert"), "-o", p("page.html"), p("s20.dcert"), p("m12.dcert"), p("r.dcert")},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, "%v: %s", args, stderr)
	}
	want := checkJSONLines(t, "-sieve", p("s12.dcert"), p("s20.dcert"), p("m12.dcert"), p("r.dcert"))
	require.Len(t, want, 3)

	ctx := browser(t)
	require.Empty(t, load(t, ctx, p("page.html")), "requests that left the page")
	got, err := chromedp.Run(ctx, chromedp.Evaluate[[]domSection](readDOM))
	require.NoError(t, err)
	require.Len(t, got, 3)
	for i, s := range got {
		require.Equal(t, want[i]["file"], s.Title)
		require.Equal(t, want[i]["kind"], s.Kind)
		require.Equal(t, "cert checked", s.Class)
		require.Equal(t, want[i]["root"], s.Root)
		require.True(t, s.Embedded, "the plots' font is not the one the page embeds")
	}

	// The 3n+1 sieve at k = 20: survivors after each step, against OEIS
	// A076227 (surviving residues mod 2^n), n = 1..20.
	a076227 := []string{"1", "1", "2", "3", "4", "8", "13", "19", "38", "64", "128", "226", "367", "734", "1295", "2114", "4228", "7495", "14990", "27328"}
	surv := got[0].Tables["survivors"]
	require.Len(t, surv, 20)
	for t1, row := range surv {
		require.Equal(t, strconv.Itoa(t1+1), row[0])
		require.Equal(t, a076227[t1], row[1], "survivors after step %d (OEIS A076227)", t1+1)
	}
	require.Equal(t, jsonText(want[0]["survivors"]), surv[19][1])
	for _, s := range []int{0, 1} {
		closedAt := want[s]["closed_at"].(map[string]any)
		for _, row := range got[s].Tables["closing"] {
			w, ok := closedAt[row[0]]
			if !ok {
				w = 0.0
			}
			require.Equal(t, jsonText(w), row[1], "classes closing at step %s", row[0])
		}
		exc := want[s]["exceptions"].([]any)
		require.Len(t, got[s].Tables["exceptions"], len(exc))
		for i, e := range exc {
			require.Equal(t, jsonText(e.(map[string]any)["n"]), got[s].Tables["exceptions"][i][0])
		}
	}

	// The range [1, 2^20): records as check -json has them, which are the
	// stopping-time records of OEIS A060412 below 2^20.
	rng := want[2]
	recs := rng["stated_stopping_times"].(map[string]any)["records"].([]any)
	rows := got[2].Tables["records"]
	require.Len(t, rows, len(recs))
	var ns []string
	for i, r := range recs {
		r := r.(map[string]any)
		require.Equal(t, jsonText(r["n"]), rows[i][0])
		require.Equal(t, jsonText(r["steps"]), rows[i][1])
		ns = append(ns, rows[i][0])
	}
	require.Equal(t, []string{"2", "3", "7", "27", "703", "10087", "35655", "270271", "362343", "381727", "626331", "1027431"}, ns, "OEIS A060412")
	counts := rng["counts"].(map[string]any)
	just := got[2].Tables["justification"]
	for i, key := range []string{"sieve", "search", "small", "cycle", "undecided"} {
		require.Equal(t, jsonText(counts[key]), just[i][1], key)
	}
	// The block maxima: as many rows as blocks, the largest of them the
	// range's largest stopping time.
	blocks := got[2].Tables["block-max"]
	require.Len(t, blocks, int(rng["blocks"].(float64)))
	best := 0
	for _, b := range blocks {
		if v, err := strconv.Atoi(b[3]); err == nil {
			best = max(best, v)
		}
		require.Equal(t, "re-derived", b[5])
	}
	require.Equal(t, jsonText(rng["stated_stopping_times"].(map[string]any)["max"].(map[string]any)["steps"]), strconv.Itoa(best))
	require.Equal(t, 3, got[2].SVGs, "justification, records and block maxima")

	// Not blank: a measurable share of the pixels is not the background.
	shot, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	require.NoError(t, err)
	img, err := png.Decode(bytes.NewReader(shot))
	require.NoError(t, err)
	require.Greater(t, inkShare(img), 0.02, "the screenshot is almost blank")
}

// inkShare is the share of pixels that differ from the top-left one, the
// page's background.
func inkShare(img image.Image) float64 {
	b := img.Bounds()
	bg := fmt.Sprint(img.At(b.Min.X, b.Min.Y).RGBA())
	ink := 0
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			if fmt.Sprint(img.At(x, y).RGBA()) != bg {
				ink++
			}
		}
	}
	return float64(ink) / float64(b.Dx()*b.Dy())
}

// The two checks of the browser test can fail: a page that refers to a
// resource elsewhere is caught, and a blank page has no ink.
func TestReportBrowserChecksCanFail(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a browser; run without -short")
	}
	dir := t.TempDir()
	leaky := filepath.Join(dir, "leaky.html")
	require.NoError(t, os.WriteFile(leaky, []byte(`<!DOCTYPE html><title>x</title><link rel="icon" href="data:,">`+
		`<p>x</p><img src="http://descent-test.invalid/pixel.png">`), 0o644))
	blank := filepath.Join(dir, "blank.html")
	require.NoError(t, os.WriteFile(blank, []byte(`<!DOCTYPE html><title>x</title><link rel="icon" href="data:,">`), 0o644))
	ctx := browser(t)
	require.Equal(t, []string{"http://descent-test.invalid/pixel.png"}, load(t, ctx, leaky))
	require.Empty(t, load(t, ctx, blank))
	shot, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	require.NoError(t, err)
	img, err := png.Decode(bytes.NewReader(shot))
	require.NoError(t, err)
	require.Zero(t, inkShare(img))
}

// The checker's draw of audited blocks is SPEC.md's: with one forged
// block, an audit fails exactly when the draw written from SPEC.md here
// holds the block.
func TestReportAuditDrawIsTheCheckers(t *testing.T) {
	dir := t.TempDir()
	sieve, good := filepath.Join(dir, "sieve.dcert"), filepath.Join(dir, "range.dcert")
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "12", "-o", sieve},
		{"emit", "range", "-sieve", sieve, "-from", "2^30", "-to", "2^30+2^18", "-block", "14", "-o", good},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, stderr)
	}
	b, err := os.ReadFile(good)
	require.NoError(t, err)
	c := openRange(t, b)
	const forged = 9
	blk := c.blocks[forged]
	blk.Sieve.Add(blk.Sieve, big.NewInt(1)) // one more by the sieve, one fewer by search,
	blk.Search.Sub(blk.Search, big.NewInt(1))
	c.h.Totals.Sieve.Add(c.h.Totals.Sieve, big.NewInt(1)) // and the totals to match
	c.h.Totals.Search.Sub(c.h.Totals.Search, big.NewInt(1))
	forgedFile := c.seal(t)
	rd, err := cert.NewReader(bytes.NewReader(forgedFile))
	require.NoError(t, err)
	root := rd.Root()
	caught, passed := 0, 0
	for seed := range 24 {
		code, rep := checkRangeJSON(t, forgedFile, sieve, "-sample", "3", "-seed", strconv.Itoa(seed))
		drawn := specDraw(root, strconv.Itoa(seed), len(c.blocks), 3)
		require.Len(t, drawn, 3)
		hit := false
		for _, i := range drawn {
			hit = hit || i == forged
		}
		if hit {
			require.Equal(t, exitInvalid, code, "seed %d draws block %d, but the audit passed: %v", seed, forged, rep)
			caught++
		} else {
			require.Equal(t, exitOK, code, "seed %d does not draw block %d, but the audit failed: %v", seed, forged, rep)
			passed++
		}
	}
	require.Positive(t, caught)
	require.Positive(t, passed)
}

// An audited range: the page says so, and labels each block as re-derived
// by the audit or bound by its hash only, as the draw says.
func TestReportLabelsAnAudit(t *testing.T) {
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "12", "-o", p("s.dcert")},
		{"emit", "range", "-sieve", p("s.dcert"), "-from", "1", "-to", "2^18", "-block", "13", "-o", p("r.dcert")},
		{"report", "-sieve", p("s.dcert"), "-sample", "5", "-seed", "reviewer", "-o", p("page.html"), p("r.dcert")},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, "%v: %s", args, stderr)
	}
	page, err := os.ReadFile(p("page.html"))
	require.NoError(t, err)
	s := string(page)
	require.Contains(t, s, `class="cert audited"`)
	require.Contains(t, s, "passes an audit of 5 of its 32 blocks (not a full check)")
	require.NotContains(t, s, "re-derived in full")
	i := strings.Index(s, `data-figure="block-max"`)
	require.Positive(t, i)
	blocks := s[i : i+strings.Index(s[i:], "</figure>")]
	require.Equal(t, 5, strings.Count(blocks, "<td>re-derived by the audit</td></tr>"), "block rows re-derived")
	require.Equal(t, 27, strings.Count(blocks, "<td>bound to the root by its hash, not re-derived</td></tr>"), "block rows hash-bound")
	rd, err := cert.NewReader(bytes.NewReader(mustRead(t, p("r.dcert"))))
	require.NoError(t, err)
	for _, b := range specDraw(rd.Root(), "reviewer", 32, 5) {
		require.Contains(t, blocks, fmt.Sprintf("<tr><td>%d</td>", b))
		row := blocks[strings.Index(blocks, fmt.Sprintf("<tr><td>%d</td>", b)):]
		row = row[:strings.Index(row, "</tr>")]
		require.Contains(t, row, "re-derived by the audit", "block %d", b)
	}
}

func mustRead(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return b
}

// The page never replaces an input, whatever path names it; a failed
// certificate is shown as failed with its reason and no plot.
func TestReportOutputsAndFailures(t *testing.T) {
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	code, _, stderr := runCLI("emit", "sieve", "-k", "10", "-o", p("s.dcert"))
	require.Equal(t, exitOK, code, stderr)
	orig, err := os.ReadFile(p("s.dcert"))
	require.NoError(t, err)
	require.NoError(t, os.Symlink(p("s.dcert"), p("link.dcert")))
	for _, args := range [][]string{
		{"report", "-o", p("s.dcert"), p("s.dcert")},
		{"report", "-o", filepath.Join(dir, ".", "s.dcert"), p("s.dcert")},
		{"report", "-o", p("link.dcert"), p("s.dcert")},
		{"report", "-sieve", p("s.dcert"), "-o", p("s.dcert"), p("other.dcert")},
		{"report", "-o", dir, p("s.dcert")},
		{"report", p("s.dcert")},
		{"report", "-o", p("x.html")},
		{"report", "-seed", "x", "-o", p("x.html"), p("s.dcert")},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitUsage, code, "%v", args)
		require.True(t, strings.HasPrefix(stderr, "descent: report: "), stderr)
		b, err := os.ReadFile(p("s.dcert"))
		require.NoError(t, err)
		require.Equal(t, orig, b, "%v changed an input", args)
	}
	_, err = os.Stat(p("x.html"))
	require.True(t, os.IsNotExist(err))

	bad := append([]byte(nil), orig...)
	bad[len(bad)-1] ^= 1
	require.NoError(t, os.WriteFile(p("bad.dcert"), bad, 0o644))
	code, stdout, stderr := runCLI("report", "-o", p("page.html"), p("s.dcert"), p("bad.dcert"))
	require.Equal(t, exitInvalid, code, stderr)
	require.Contains(t, stdout, "2 certificates, 1 failed")
	require.Contains(t, stderr, "bad.dcert failed its check")
	page, err := os.ReadFile(p("page.html"))
	require.NoError(t, err)
	s := string(page)
	i := strings.Index(s, `<section class="cert failed"`)
	require.Positive(t, i)
	failed := s[i:]
	require.Contains(t, failed, "<b>hash</b>")
	require.NotContains(t, failed, "<svg")
	require.NotContains(t, failed, "Claim")
	require.Equal(t, 2, strings.Count(s[:i], "<svg"), "the valid sieve keeps its plots")
}

// specDraw is the draw of audited blocks written from SPEC.md ("Audits"),
// apart from the checker's: key = BLAKE2b-256("descent audit" 00 || root
// || seed); the c-th candidate is the first 8 bytes of BLAKE2b-256(key ||
// c as u64), big-endian, mod m; repeats are skipped until n are drawn.
func specDraw(root cert.Hash, seed string, m, n int) []int {
	key := blake2b.Sum256(append(append([]byte("descent audit\x00"), root[:]...), seed...))
	seen := map[int]bool{}
	var out []int
	for c := uint64(0); len(out) < min(n, m); c++ {
		h := blake2b.Sum256(binary.BigEndian.AppendUint64(bytes.Clone(key[:]), c))
		if i := int(binary.BigEndian.Uint64(h[:8]) % uint64(m)); !seen[i] {
			seen[i] = true
			out = append(out, i)
		}
	}
	return out
}
