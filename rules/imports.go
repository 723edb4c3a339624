package rules

import (
	"fmt"
	"regexp"
	"time"

	"github.com/paulmach/osm"
)

// ImportRules says which changesets were part of an import and how import
// changesets group into episodes. It is a read-only value, safe for concurrent use.
type ImportRules struct {
	gapDays  float64
	matchers []matcher
}

type matcher struct {
	name       string
	tags       []tagCond
	accounts   []*regexp.Regexp
	accountIDs map[osm.UserID]bool
	changesets map[osm.ChangesetID]bool
	minChanges int
	minShare   float64
	hasShare   bool
}

type tagCond struct {
	key    string
	equals string
	re     *regexp.Regexp
}

func compileImports(s detectionSpec) (ImportRules, error) {
	ir := ImportRules{gapDays: s.GroupGapDays}
	for _, ms := range s.Matchers {
		m := matcher{name: ms.Name, minChanges: ms.MinChanges}
		for _, c := range ms.ChangesetTags {
			tc := tagCond{key: c.Key, equals: c.Equals}
			if c.Matches != "" {
				re, err := regexp.Compile(c.Matches)
				if err != nil {
					return ImportRules{}, fmt.Errorf("matcher %q: %w", ms.Name, err)
				}
				tc.re = re
			}
			m.tags = append(m.tags, tc)
		}
		for _, a := range ms.AccountNames {
			re, err := regexp.Compile(a)
			if err != nil {
				return ImportRules{}, fmt.Errorf("matcher %q: %w", ms.Name, err)
			}
			m.accounts = append(m.accounts, re)
		}
		if ms.AccountIDs != nil {
			m.accountIDs = make(map[osm.UserID]bool, len(ms.AccountIDs))
			for _, id := range ms.AccountIDs {
				m.accountIDs[osm.UserID(id)] = true
			}
		}
		if ms.ChangesetIDs != nil {
			m.changesets = make(map[osm.ChangesetID]bool, len(ms.ChangesetIDs))
			for _, id := range ms.ChangesetIDs {
				m.changesets[osm.ChangesetID(id)] = true
			}
		}
		if ms.MinCreationShare != nil {
			m.minShare, m.hasShare = *ms.MinCreationShare, true
		}
		ir.matchers = append(ir.matchers, m)
	}
	return ir, nil
}

// GroupGap is the longest pause between two matched changesets of one account
// and source that still keeps them in one episode: changesets further apart
// start a new episode.
func (ir ImportRules) GroupGap() time.Duration {
	return time.Duration(ir.gapDays * float64(24*time.Hour))
}

// MatcherNames returns the matchers' names in file order.
func (ir ImportRules) MatcherNames() []string {
	out := make([]string, len(ir.matchers))
	for i, m := range ir.matchers {
		out[i] = m.name
	}
	return out
}

// Match reports whether a changeset is an import changeset and names the first
// matcher, in file order, that matches it. creates is the number of versions
// in the changeset that created an object (version 1) and total the number of
// all its versions, both counted from history. When total is 0 (history holds
// none of its versions), min_changes uses the changeset's num_changes and a
// min_creation_share condition does not hold.
func (ir ImportRules) Match(cs *osm.Changeset, creates, total int) (matcher string, ok bool) {
	for i := range ir.matchers {
		if ir.matchers[i].match(cs, creates, total) {
			return ir.matchers[i].name, true
		}
	}
	return "", false
}

// MatchAll returns the names of every matcher that matches the changeset, in
// file order; nil when none does. The counts are as for Match.
func (ir ImportRules) MatchAll(cs *osm.Changeset, creates, total int) []string {
	var out []string
	for i := range ir.matchers {
		if ir.matchers[i].match(cs, creates, total) {
			out = append(out, ir.matchers[i].name)
		}
	}
	return out
}

// match holds when all the matcher's conditions hold.
func (m *matcher) match(cs *osm.Changeset, creates, total int) bool {
	if m.changesets != nil && !m.changesets[cs.ID] {
		return false
	}
	if m.accountIDs != nil && !m.accountIDs[cs.UserID] {
		return false
	}
	if m.accounts != nil {
		ok := false
		for _, re := range m.accounts {
			if re.MatchString(cs.User) {
				ok = true
				break
			}
		}
		if !ok {
			return false
		}
	}
	for _, c := range m.tags {
		v := cs.Tags.Find(c.key)
		switch {
		case v == "":
			return false
		case c.re != nil && !c.re.MatchString(v):
			return false
		case c.equals != "" && v != c.equals:
			return false
		}
	}
	if m.minChanges > 0 {
		n := total
		if n == 0 {
			n = cs.ChangesCount
		}
		if n < m.minChanges {
			return false
		}
	}
	if m.hasShare {
		if total <= 0 || float64(creates) < m.minShare*float64(total) {
			return false
		}
	}
	return true
}
