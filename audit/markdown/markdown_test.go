package markdown_test

import (
	"bytes"
	"fmt"
	"strings"
	"testing"

	"github.com/yuin/goldmark"
	"github.com/yuin/goldmark/extension"

	"github.com/loadwake/loadwake/audit/markdown"
)

// An account name or tag value from OSM data cannot open markup in report.md.
func ExampleEscape() {
	fmt.Println(markdown.Escape("shop=<b>*Best* [deals]</b> | #1\nsecond line"))
	// Output: shop=\<b\>\*Best\* \[deals\]\</b\> \| \#1 second line
}

func TestEscape(t *testing.T) {
	// Every markup character gets a backslash (CommonMark 0.31, "Backslash
	// escapes"; GFM 0.29 strikethrough "~", tables "|", autolinks); line
	// breaks become spaces.
	cases := []struct{ in, want string }{
		{`a\b`, `a\\b`},
		{"*bold* _it_", `\*bold\* \_it\_`},
		{"[x](y)", `\[x\](y)`},
		{"![img](y)", `\!\[img\](y)`},
		{"<script>", `\<script\>`},
		{"a|b", `a\|b`},
		{"# head", `\# head`},
		{"`code`", "\\`code\\`"},
		{"~~struck~~", `\~\~struck\~\~`},
		{"&amp; {x} $y", `\&amp; \{x\} \$y`},
		{"www.evil.example", `www\.evil.example`},
		{"https://evil.example/x", `https\://evil.example/x`},
		{"mail me@evil.example", `mail me\@evil.example`},
		{"two\nlines\r\nhere\tand\u2028there", "two lines  here and there"},
		{"plain words, 12.5%: fine", "plain words, 12.5%: fine"},
	}
	for _, c := range cases {
		if got := markdown.Escape(c.in); got != c.want {
			t.Errorf("Escape(%q) = %q, want %q", c.in, got, c.want)
		}
	}
}

// TestEscapeRendersAsText renders hostile names, each escaped, inside a
// list item and a table cell with a GFM renderer (github.com/yuin/goldmark
// with its GFM extensions: tables, strikethrough, linkify, task lists) and
// checks that the HTML holds no link, image, emphasis, strike-through, raw
// HTML or extra table cell, and that the text survives.
func TestEscapeRendersAsText(t *testing.T) {
	hostile := []string{
		"import_~~struck~~ &amp; www.evil.example",
		"[click](https://evil.example) ![x](https://evil.example/x.png)",
		"<script>alert(1)</script> <b>bold</b>",
		"*emph* **strong** _u_ __uu__",
		"a | b | c",
		"https://evil.example/path?q=1 and http://plain.example",
		"name@evil.example",
		"`code` &lt;tag&gt; &#60;x&#62;",
		"# not a heading\n- not a list\n> not a quote",
		"<https://evil.example> <me@evil.example>",
		"[ref]: https://evil.example",
		"[x]\n\n[x]: https://evil.example",
	}
	md := goldmark.New(goldmark.WithExtensions(extension.GFM))
	for _, h := range hostile {
		e := markdown.Escape(h)
		src := fmt.Sprintf("- %s\n\n| name | n |\n|---|---|\n| %s | 1 |\n", e, e)
		var out bytes.Buffer
		if err := md.Convert([]byte(src), &out); err != nil {
			t.Fatal(err)
		}
		html := out.String()
		for _, bad := range []string{"<a ", "<img", "<em>", "<strong>", "<del>", "<script", "<b>", "<h1", "<blockquote", "<code>"} {
			if strings.Contains(html, bad) {
				t.Errorf("%q renders %s:\n%s", h, bad, html)
			}
		}
		if n := strings.Count(html, "<td>"); n != 2 {
			t.Errorf("%q: table row has %d cells, want 2:\n%s", h, n, html)
		}
		if !strings.Contains(html, "evil") && strings.Contains(h, "evil") {
			t.Errorf("%q: text lost:\n%s", h, html)
		}
	}
}
