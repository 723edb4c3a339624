package report_test

import (
	"fmt"

	"github.com/loadwake/loadwake/audit/report"
)

// An account name or tag value from OSM data cannot open markup in report.md.
func ExampleMarkdownEscape() {
	fmt.Println(report.MarkdownEscape("shop=<b>*Best* [deals]</b> | #1\nsecond line"))
	// Output: shop=\<b\>\*Best\* \[deals\]\</b\> \| \#1 second line
}
