package markdown_test

import (
	"fmt"
	"testing"

	"github.com/loadwake/loadwake/audit/markdown"
)

// An account name or tag value from OSM data cannot open markup in report.md.
func ExampleEscape() {
	fmt.Println(markdown.Escape("shop=<b>*Best* [deals]</b> | #1\nsecond line"))
	// Output: shop=\<b\>\*Best\* \[deals\]\</b\> \| \#1 second line
}

func TestEscape(t *testing.T) {
	// Every markup character gets a backslash (CommonMark 0.31, "Backslash
	// escapes"; GFM 0.29 strikethrough "~" and tables "|"); line breaks become
	// spaces.
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
		{"two\nlines\r\nhere\tand\u2028there", "two lines  here and there"},
		{"plain words, 12.5%", "plain words, 12.5%"},
	}
	for _, c := range cases {
		if got := markdown.Escape(c.in); got != c.want {
			t.Errorf("Escape(%q) = %q, want %q", c.in, got, c.want)
		}
	}
}
