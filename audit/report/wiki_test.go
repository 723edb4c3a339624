package report

import (
	"bytes"
	"html"
	"regexp"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
)

// No MediaWiki parser ships as a Debian package that a Go test can run
// cheaply (MediaWiki itself needs PHP and a database), so the wikitext is
// checked by the rules of the MediaWiki markup specification
// (https://www.mediawiki.org/wiki/Help:Formatting, Help:Links, Help:Tables,
// Help:Templates, Help:Signatures, Help:Magic_words; from memory): after the
// numeric character references are taken out, the text that came from data
// holds none of the characters that open markup, each table row has as many
// cells as its header, every line starts with markup loadwake wrote, and
// decoding the references gives back the data exactly.

// hostileWiki is an audit whose strings from OSM data try every MediaWiki
// construct: links, categories, templates, parser functions, table breaks,
// bold and italic, signatures, HTML, headings, behaviour switches, lists at a
// line start, free web addresses and magic links.
func hostileWiki() Input {
	in := hostile()
	r := in.Audit
	r.Import.ID = "[[Category:Spam]]{{delete}}"
	r.Import.Accounts = []string{"'''bold''' ''it'' ~~~~", "a|b||c\n|}\n{|", "== H ==\n* item\n# n\n; d : x", "__NOTOC__ <script>x</script> https://evil.example/x ISBN 0-306-40615-2"}
	r.Warnings = append(r.Warnings, "{{#if:1|boom}} [https://evil.example click] &amp; <ref>x</ref>")
	r.UnitList[0].ID = "{{subst:x}}"
	in.Checklist.Rows[0].Key = "name|style=\"color:red\"|x!!y"
	in.Checklist.Rows[0].Class = "shop=''[[x]]''"
	in.Audit.Provenance = hostileProvenance()
	in.Audit.Provenance.Accounts = append(in.Audit.Provenance.Accounts, "[[User:x|x]]", "https://evil.example/y")
	return in
}

// wikiMarkupInData matches what may not survive in escaped data once the
// numeric character references are removed.
var wikiMarkupInData = regexp.MustCompile(`[\[\]{}|!'~<>&:;]|__|^[-*#=]|https?:|ISBN |RFC |PMID `)

func TestWikiEscaping(t *testing.T) {
	in := hostileWiki()
	var b bytes.Buffer
	if err := WriteWiki(&b, in); err != nil {
		t.Fatal(err)
	}
	page := b.String()
	refs := regexp.MustCompile(`&#[0-9]+;`)
	t.Run("round trip", func(t *testing.T) {
		for _, s := range append(append([]string{in.Audit.Import.ID, in.Checklist.Rows[0].Key, in.Checklist.Rows[0].Class}, in.Audit.Import.Accounts...),
			in.Audit.Provenance.Accounts...) {
			want := strings.NewReplacer("\n", " ", "\r", " ", "\t", " ").Replace(s)
			got := wikiText(s)
			if html.UnescapeString(got) != want {
				t.Errorf("wikiText(%q) decodes to %q", s, html.UnescapeString(got))
			}
			if bad := wikiMarkupInData.FindString(refs.ReplaceAllString(got, "\x00")); bad != "" {
				t.Errorf("wikiText(%q) = %q keeps markup %q", s, got, bad)
			}
			if !strings.Contains(html.UnescapeString(page), want) {
				t.Errorf("page lacks %q", want)
			}
		}
	})
	t.Run("no markup from data", func(t *testing.T) {
		plain := refs.ReplaceAllString(page, "")
		for _, bad := range []string{"[[", "{{", "~~~", "__NOTOC__", "<script", "<ref", "''bold", "https://evil", "[https://evil", "ISBN 0", "style=\"color:red\""} {
			if strings.Contains(plain, bad) {
				t.Errorf("page holds %q outside a character reference", bad)
			}
		}
	})
	t.Run("lines start with loadwake's markup", func(t *testing.T) {
		// Every line is a heading, list item, definition, table markup, the
		// banner, the title, or escaped prose (whose first character is never
		// markup, because wikiText escapes it).
		structural := regexp.MustCompile(`^(|=+ .* =+|\* .*|; .*|: .*|\{\| class="wikitable"|\|-|\|\}|! .*|\| .*|'''.*'''|<div style="[^"]*">'''.*'''</div>|[^ *#:;=|!{<'\-_&].*)$`)
		for i, line := range strings.Split(page, "\n") {
			if !structural.MatchString(line) {
				t.Errorf("line %d %q starts with markup loadwake did not write", i+1, line)
			}
		}
	})
	t.Run("table rows", func(t *testing.T) {
		var head, cells int
		inTable := false
		check := func(line int) {
			if inTable && cells != 0 && cells != head {
				t.Errorf("table row ending at line %d has %d cells, header %d", line, cells, head)
			}
			cells = 0
		}
		for i, line := range strings.Split(page, "\n") {
			switch {
			case strings.HasPrefix(line, "{|"):
				inTable, head, cells = true, 0, 0
			case line == "|}":
				check(i + 1)
				inTable = false
			case line == "|-":
				check(i + 1)
			case strings.HasPrefix(line, "! "):
				head++
				if strings.Contains(line[2:], "!!") || strings.Contains(line[2:], "||") {
					t.Errorf("line %d: header cell splits: %q", i+1, line)
				}
			case strings.HasPrefix(line, "| "):
				cells++
				body := strings.TrimPrefix(line, `| style="text-align:right" `)
				if strings.Contains(body[2:], "|") {
					t.Errorf("line %d: cell holds a pipe: %q", i+1, line)
				}
			}
		}
	})
	t.Run("links", func(t *testing.T) {
		// The only external links are the changeset page and the plain web
		// address from the changeset tags (hostileProvenance).
		links := regexp.MustCompile(`\[(https?://[^ \]]+) `).FindAllStringSubmatch(refs.ReplaceAllString(page, "#"), -1)
		var got []string
		for _, l := range links {
			got = append(got, l[1])
		}
		want := []string{audit.ChangesetURL(42), "https://wiki.example.org/Import/Harbour"}
		if strings.Join(got, " ") != strings.Join(want, " ") {
			t.Errorf("links = %v, want %v", got, want)
		}
	})
}

// TestWikiSections checks that the wiki page tells the same story as
// report.md: the same section headings in the same order, and the headline
// readings word for word once unescaped.
func TestWikiSections(t *testing.T) {
	in := Input{Audit: fixedAudit(), Checklist: &checklist.Checklist{Import: "imp-42", Cautions: []string{"check locally"}}}
	var w, m bytes.Buffer
	if err := WriteWiki(&w, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteMarkdown(&m, in); err != nil {
		t.Fatal(err)
	}
	var mdHeads, wikiHeads []string
	for _, line := range strings.Split(m.String(), "\n") {
		if strings.HasPrefix(line, "## ") {
			mdHeads = append(mdHeads, strings.TrimPrefix(line, "## "))
		}
	}
	h2 := regexp.MustCompile(`^== (.*) ==$`)
	for _, line := range strings.Split(w.String(), "\n") {
		if s := h2.FindStringSubmatch(line); s != nil {
			wikiHeads = append(wikiHeads, html.UnescapeString(s[1]))
		}
	}
	if strings.Join(mdHeads, "|") != strings.Join(wikiHeads, "|") {
		t.Errorf("wiki sections %q, Markdown sections %q", wikiHeads, mdHeads)
	}
	plain := html.UnescapeString(w.String())
	for _, h := range newView(in).Headline {
		if !strings.Contains(plain, h.Reading) {
			t.Errorf("wiki page lacks the reading %q", h.Reading)
		}
	}
}
