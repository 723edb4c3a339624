// Package markdown escapes text from OSM data (account names, tag keys and
// values, unit ids) for the Markdown that loadwake writes, so that no value
// can open markup or become a link: one escaper for every report, checklist
// and assessment.
package markdown

import "strings"

// Escape escapes s for CommonMark and GitHub-flavoured Markdown inline text:
//   - every ASCII punctuation character that can start or end markup gets a
//     backslash (CommonMark 0.31, "Backslash escapes": any ASCII punctuation
//     may be escaped): those of emphasis, code, links and images, HTML,
//     entities, headings, GFM tables and strikethrough; a parenthesis needs
//     none once brackets are escaped;
//   - the triggers of GFM's extended autolinks (GFM 0.29, "Autolinks
//     (extension)": "www.", "http://", "https://" and e-mail addresses) are
//     broken by escaping the "." after "www", the ":" of "://" and every "@",
//     so a bare address in a name stays text;
//   - line breaks, tabs and the Unicode line and paragraph separators become
//     spaces, so a value cannot open a block.
func Escape(s string) string {
	var b strings.Builder
	b.Grow(len(s) + 8)
	for i, r := range s {
		switch r {
		case '\\', '`', '*', '_', '{', '}', '[', ']', '<', '>', '#', '!', '|', '~', '&', '$', '@':
			b.WriteByte('\\')
			b.WriteRune(r)
		case ':':
			if strings.HasPrefix(s[i:], "://") {
				b.WriteByte('\\')
			}
			b.WriteRune(r)
		case '.':
			if i >= 3 && strings.EqualFold(s[i-3:i], "www") {
				b.WriteByte('\\')
			}
			b.WriteRune(r)
		case '\n', '\r', '\t', '\u2028', '\u2029':
			b.WriteByte(' ')
		default:
			b.WriteRune(r)
		}
	}
	return b.String()
}
