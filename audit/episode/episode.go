package episode

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"iter"
	"math"
	"slices"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/rules"
)

// Source is the history Detect reads. *ingest.Store meets it.
type Source interface {
	// ScanChangesets calls fn for every stored changeset's metadata, in
	// ascending id order (Detect joins them with its counters in that order).
	ScanChangesets(ctx context.Context, fn func(c *osm.Changeset) error) error
	// ScanVersions calls fn for every stored version of type t, id ascending
	// then version ascending.
	ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error
}

// ErrNoImport is returned (wrapped) when a named import matches nothing in the store.
var ErrNoImport = errors.New("episode: no such import in the store")

// ManualMatcher is the matcher name of an episode the user named.
const ManualMatcher = "manual"

// Options names an import explicitly instead of finding imports by the
// rules. When Changesets or Account is set, Detect returns exactly one
// episode holding those changesets and every changeset of that account (the
// union when both are set), whatever the rules say.
type Options struct {
	// Changesets are the ids of the import's changesets.
	Changesets []int64
	// Account is the import account: its name, or its numeric id written in
	// decimal (a name made of digits matches both).
	Account string
	// IncludeEmpty keeps matched changesets the store holds no versions of
	// (changeset metadata that reaches beyond the history's extract). By
	// default they are left out of rule-based episodes.
	IncludeEmpty bool

	spill int // changesets counted in memory at a time; 0 means defaultSpill
}

func (o Options) manual() bool { return len(o.Changesets) > 0 || o.Account != "" }

// Account is an OSM account: its numeric id and its name.
type Account struct {
	UID  osm.UserID `json:"uid"`
	Name string     `json:"name"`
}

// ClassCount is how many versions of an episode had a feature class.
type ClassCount struct {
	Class string `json:"class"`
	Count int    `json:"count"`
}

// Episode is one import: changesets of one account and one changeset source
// tag, each following the previous within the rules' group gap, or the
// changesets a user named.
//
// ID is derived from the content, so a rerun with the same store and rules
// gives the same IDs: "imp-" and the smallest changeset id for an episode
// found by the rules, "manual-" and the smallest changeset id for a named one.
//
// Version counts: Created are versions 1, Deleted versions with visible=false,
// Modified the other versions; all count versions the store holds, which for
// an extract may be fewer than the changesets' num_changes. Classes count
// those versions by feature class (a deletion by the class of the version it
// deleted); versions without a class are not counted there.
type Episode struct {
	ID         string            `json:"id"`
	Matchers   []string          `json:"matchers"`         // matcher names that matched any changeset; ["manual"] when named
	Accounts   []Account         `json:"accounts"`         // by uid, then name
	Source     string            `json:"source,omitempty"` // changeset source tag shared by the episode's changesets (rule-based)
	Changesets []osm.ChangesetID `json:"changesets"`       // ascending
	Created    int               `json:"created"`
	Modified   int               `json:"modified"`
	Deleted    int               `json:"deleted"`
	Classes    []ClassCount      `json:"classes"`     // by count descending, then class
	First      time.Time         `json:"first"`       // opening of the earliest changeset (UTC)
	Last       time.Time         `json:"last"`        // closing of the latest changeset (UTC)
	FirstMonth string            `json:"first_month"` // "YYYY-MM" of First
	LastMonth  string            `json:"last_month"`  // "YYYY-MM" of Last
	// BBox is [min_lon, min_lat, max_lon, max_lat] (RFC 7946 order) over the
	// changesets' bounding boxes, or over their node versions where a
	// changeset has none; nil when neither is known.
	BBox []float64 `json:"bbox,omitempty"`
}

// Versions is the number of versions the episode made.
func (e *Episode) Versions() int { return e.Created + e.Modified + e.Deleted }

// Bound returns the episode's bounding box; ok is false when it is unknown.
func (e *Episode) Bound() (b orb.Bound, ok bool) {
	if len(e.BBox) != 4 {
		return orb.Bound{}, false
	}
	return orb.Bound{Min: orb.Point{e.BBox[0], e.BBox[1]}, Max: orb.Point{e.BBox[2], e.BBox[3]}}, true
}

// csMeta is what grouping needs of a changeset.
type csMeta struct {
	id         osm.ChangesetID
	uid        osm.UserID
	user       string
	source     string
	start, end time.Time
	bbox       orb.Bound
	hasBBox    bool
	matchers   []string
	stats      *csStats
}

// Detect finds the import episodes in a history. It counts per changeset
// the versions that created, modified and deleted objects and their feature
// classes (r.Class), then reads the changesets, matches each with r's import
// rules and groups the matched ones by account and source tag into episodes:
// a changeset opened less than the rules' group gap after the previous one
// closed joins its episode. Changesets without stored metadata are matched on
// what their versions tell (account, counts). When opts names an import, the
// result is that one episode. Episodes come ordered by First, then ID.
//
// Memory: the version scan counts at most a fixed number of changesets at a
// time (defaultSpill) and writes their partial counters into the store's
// derived area (when src is Derived, as *ingest.Store is; otherwise into
// memory); the counters are then read back in changeset id order beside the
// changeset records, which ScanChangesets delivers in ascending id order, and
// only matched changesets are kept. The stored counters are reused by later
// runs with the same rules while the store's classification summary has the
// fingerprint of the versions they were counted from, so a second run reads
// no versions. Cancelling ctx stops the scans and returns ctx's error.
func Detect(ctx context.Context, src Source, r *rules.RuleSet, opts Options) ([]Episode, error) {
	spill := opts.spill
	if spill <= 0 {
		spill = defaultSpill
	}
	stats, err := statsStream(ctx, src, r, spill)
	if err != nil {
		return nil, err
	}
	next, stop := iter.Pull2(stats)
	defer stop()
	ir := r.Imports()
	var matched []*csMeta
	wantIDs := make(map[osm.ChangesetID]bool, len(opts.Changesets))
	for _, id := range opts.Changesets {
		wantIDs[osm.ChangesetID(id)] = true
	}
	wantUID, uidErr := strconv.ParseInt(opts.Account, 10, 64)
	named := func(id osm.ChangesetID, uid osm.UserID, user string) bool {
		return wantIDs[id] || opts.Account != "" && (user == opts.Account || uidErr == nil && int64(uid) == wantUID)
	}
	// match keeps a changeset, with its counters or none, when it matches.
	match := func(c *osm.Changeset, st *csStats) {
		if opts.manual() {
			if named(c.ID, c.UserID, c.User) {
				m := newMeta(c, st)
				m.matchers = []string{ManualMatcher}
				matched = append(matched, m)
			}
			return
		}
		creates, total := 0, 0
		if st != nil {
			creates, total = int(st.creates), st.total()
		} else if !opts.IncludeEmpty {
			return
		}
		if names := ir.MatchAll(c, creates, total); names != nil {
			m := newMeta(c, st)
			m.matchers = names
			matched = append(matched, m)
		}
	}
	// onlyVersions matches a changeset known only from its versions.
	onlyVersions := func(st *csStats) {
		match(&osm.Changeset{ID: st.id, UserID: st.uid, User: st.user, ChangesCount: st.total()}, st)
	}
	pending, perr, more := next()
	prev := osm.ChangesetID(math.MinInt64)
	first := true
	err = src.ScanChangesets(ctx, func(c *osm.Changeset) error {
		if !first && c.ID <= prev {
			return fmt.Errorf("%w: changeset %d after %d", errOrder, c.ID, prev)
		}
		first, prev = false, c.ID
		for more && perr == nil && pending.id < c.ID {
			onlyVersions(pending)
			pending, perr, more = next()
		}
		if perr != nil {
			return perr
		}
		var st *csStats
		if more && pending.id == c.ID {
			st = pending
			pending, perr, more = next()
		}
		match(c, st)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("audit: detect imports: scan changesets: %w", err)
	}
	for ; more; pending, perr, more = next() {
		if perr != nil {
			return nil, perr
		}
		onlyVersions(pending)
	}
	if opts.manual() {
		return manualEpisode(matched, opts)
	}
	return groupEpisodes(matched, ir.GroupGap()), nil
}

// errOrder is returned (wrapped) when a Source's changesets do not come in
// ascending id order.
var errOrder = errors.New("episode: changesets out of id order")

func newMeta(c *osm.Changeset, st *csStats) *csMeta {
	m := &csMeta{id: c.ID, uid: c.UserID, user: c.User, source: c.Tags.Find("source"), stats: st,
		start: c.CreatedAt.UTC(), end: c.ClosedAt.UTC()}
	if st != nil {
		if m.start.IsZero() {
			m.start = unixUTC(st.first)
		}
		if m.end.IsZero() {
			m.end = unixUTC(st.last)
		}
	}
	if m.end.Before(m.start) {
		m.end = m.start
	}
	if c.MinLat != 0 || c.MaxLat != 0 || c.MinLon != 0 || c.MaxLon != 0 {
		m.bbox = orb.Bound{Min: orb.Point{c.MinLon, c.MinLat}, Max: orb.Point{c.MaxLon, c.MaxLat}}
		m.hasBBox = true
	} else if st != nil && st.hasNodes {
		m.bbox, m.hasBBox = st.nodes, true
	}
	return m
}

// groupEpisodes groups matched changesets by account and source tag, splitting
// where a changeset opens group gap or more after the previous one closed.
func groupEpisodes(matched []*csMeta, gap time.Duration) []Episode {
	type groupKey struct {
		uid    osm.UserID
		source string
	}
	groups := map[groupKey][]*csMeta{}
	var keys []groupKey
	for _, m := range matched {
		k := groupKey{m.uid, m.source}
		if _, ok := groups[k]; !ok {
			keys = append(keys, k)
		}
		groups[k] = append(groups[k], m)
	}
	var out []Episode
	for _, k := range keys {
		ms := groups[k]
		slices.SortFunc(ms, func(a, b *csMeta) int {
			if c := a.start.Compare(b.start); c != 0 {
				return c
			}
			return compareID(a.id, b.id)
		})
		begin := 0
		end := ms[0].end
		for i := 1; i <= len(ms); i++ {
			if i < len(ms) && ms[i].start.Sub(end) < gap {
				if ms[i].end.After(end) {
					end = ms[i].end
				}
				continue
			}
			e := buildEpisode(ms[begin:i], "imp-")
			e.Source = k.source
			out = append(out, e)
			if i < len(ms) {
				begin, end = i, ms[i].end
			}
		}
	}
	sortEpisodes(out)
	return out
}

func compareID(a, b osm.ChangesetID) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

func sortEpisodes(es []Episode) {
	slices.SortFunc(es, func(a, b Episode) int {
		if c := a.First.Compare(b.First); c != 0 {
			return c
		}
		return strings.Compare(a.ID, b.ID)
	})
}

func manualEpisode(matched []*csMeta, opts Options) ([]Episode, error) {
	found := map[osm.ChangesetID]bool{}
	for _, m := range matched {
		found[m.id] = true
	}
	var missing []string
	for _, id := range opts.Changesets {
		if !found[osm.ChangesetID(id)] {
			missing = append(missing, strconv.FormatInt(id, 10))
		}
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("%w: changeset(s) %s neither in the changeset metadata nor in the versions",
			ErrNoImport, strings.Join(missing, ", "))
	}
	if len(matched) == 0 {
		return nil, fmt.Errorf("%w: no changeset of account %q", ErrNoImport, opts.Account)
	}
	slices.SortFunc(matched, func(a, b *csMeta) int { return compareID(a.id, b.id) })
	return []Episode{buildEpisode(matched, "manual-")}, nil
}

// buildEpisode sums the changesets of one episode.
func buildEpisode(ms []*csMeta, prefix string) Episode {
	e := Episode{Matchers: []string{}, Accounts: []Account{}, Classes: []ClassCount{}}
	classes := map[string]int{}
	var bbox orb.Bound
	hasBBox := false
	for i, m := range ms {
		e.Changesets = append(e.Changesets, m.id)
		for _, name := range m.matchers {
			if !slices.Contains(e.Matchers, name) {
				e.Matchers = append(e.Matchers, name)
			}
		}
		acc := Account{UID: m.uid, Name: m.user}
		if !slices.Contains(e.Accounts, acc) {
			e.Accounts = append(e.Accounts, acc)
		}
		if i == 0 || m.start.Before(e.First) {
			e.First = m.start
		}
		if i == 0 || m.end.After(e.Last) {
			e.Last = m.end
		}
		if m.hasBBox {
			if !hasBBox {
				bbox, hasBBox = m.bbox, true
			} else {
				bbox = bbox.Union(m.bbox)
			}
		}
		if st := m.stats; st != nil {
			e.Created += int(st.creates)
			e.Modified += int(st.modifies)
			e.Deleted += int(st.deletes)
			for _, c := range st.classes {
				classes[c.class] += int(c.n)
			}
		}
	}
	slices.Sort(e.Changesets)
	slices.SortFunc(e.Accounts, func(a, b Account) int {
		if a.UID != b.UID {
			if a.UID < b.UID {
				return -1
			}
			return 1
		}
		return strings.Compare(a.Name, b.Name)
	})
	for c, n := range classes {
		e.Classes = append(e.Classes, ClassCount{Class: c, Count: n})
	}
	slices.SortFunc(e.Classes, func(a, b ClassCount) int {
		if a.Count != b.Count {
			return b.Count - a.Count
		}
		return strings.Compare(a.Class, b.Class)
	})
	e.ID = prefix + strconv.FormatInt(int64(e.Changesets[0]), 10)
	e.FirstMonth, e.LastMonth = e.First.Format("2006-01"), e.Last.Format("2006-01")
	if hasBBox {
		e.BBox = []float64{bbox.Min[0], bbox.Min[1], bbox.Max[0], bbox.Max[1]}
	}
	return e
}

// ReadChangesetIDs reads changeset ids from a list a user wrote: ids separated
// by spaces, commas or new lines, "#" starting a comment to the end of the
// line. name is used in errors, which give the line and column of a bad id.
func ReadChangesetIDs(r io.Reader, name string) ([]int64, error) {
	var ids []int64
	sc := bufio.NewScanner(r)
	line := 0
	for sc.Scan() {
		line++
		text := sc.Text()
		if i := strings.IndexByte(text, '#'); i >= 0 {
			text = text[:i]
		}
		col := 0
		for col < len(text) {
			if c := text[col]; c == ' ' || c == '\t' || c == ',' || c == '\r' {
				col++
				continue
			}
			end := col
			for end < len(text) && !strings.ContainsRune(" \t,\r", rune(text[end])) {
				end++
			}
			id, err := strconv.ParseInt(text[col:end], 10, 64)
			if err != nil || id <= 0 {
				return nil, fmt.Errorf("%s:%d:%d: %q is not a changeset id (a positive whole number)", name, line, col+1, text[col:end])
			}
			ids = append(ids, id)
			col = end
		}
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s: line %d: %w", name, line+1, err)
	}
	if len(ids) == 0 {
		return nil, fmt.Errorf("%s: no changeset ids", name)
	}
	return ids, nil
}

// Caution is printed with episode lists: what they are and are not.
const Caution = `Episodes are found from changeset tags, account names and sizes: they are
candidates to check, not findings. Confirm each against the import's
documentation and its community discussion before drawing conclusions; an
account's edits say nothing about the people behind it. Any new import follows
the community's import guidelines and local review.`

// Write prints episodes as a table, one a line, then Caution.
func Write(w io.Writer, eps []Episode) error {
	bw := bufio.NewWriter(w)
	if len(eps) == 0 {
		fmt.Fprintln(bw, "no import episodes found")
	} else {
		tw := tabwriter.NewWriter(bw, 0, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "EPISODE\tFIRST\tLAST\tACCOUNTS\tCHANGESETS\tCREATED\tMODIFIED\tDELETED\tCLASSES\tMATCHED BY")
		for i := range eps {
			e := &eps[i]
			var accounts []string
			for _, a := range e.Accounts {
				accounts = append(accounts, fmt.Sprintf("%s (%d)", a.Name, a.UID))
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\t%d\t%d\t%d\t%s\t%s\n", e.ID, e.FirstMonth, e.LastMonth,
				strings.Join(accounts, ", "), len(e.Changesets), e.Created, e.Modified, e.Deleted,
				episodeClasses(e.Classes, 3), strings.Join(e.Matchers, ","))
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	fmt.Fprintf(bw, "\n%s\n", Caution)
	return bw.Flush()
}

// episodeClasses names the n most frequent classes, "-" when none.
func episodeClasses(cs []ClassCount, n int) string {
	if len(cs) == 0 {
		return "-"
	}
	var parts []string
	for i, c := range cs {
		if i == n {
			parts = append(parts, fmt.Sprintf("+%d more", len(cs)-n))
			break
		}
		parts = append(parts, fmt.Sprintf("%s %d", c.Class, c.Count))
	}
	return strings.Join(parts, ", ")
}

// WriteJSON prints episodes as an indented JSON array of Episode
// objects (an empty array when there are none).
func WriteJSON(w io.Writer, eps []Episode) error {
	if eps == nil {
		eps = []Episode{}
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(eps)
}

// Find returns the episode with the given id. An empty id picks the only
// episode when there is exactly one. The error of an unknown id lists the known
// ones.
func Find(eps []Episode, id string) (*Episode, error) {
	if id == "" && len(eps) == 1 {
		return &eps[0], nil
	}
	for i := range eps {
		if eps[i].ID == id {
			return &eps[i], nil
		}
	}
	known := make([]string, len(eps))
	for i, e := range eps {
		known[i] = e.ID
	}
	switch {
	case len(eps) == 0:
		return nil, fmt.Errorf("%w: the store holds no detected import; name one with --changesets or --account", ErrNoImport)
	case id == "":
		return nil, fmt.Errorf("%w: choose one with --import: %s", ErrNoImport, strings.Join(known, ", "))
	}
	return nil, fmt.Errorf("%w: %q; known imports: %s", ErrNoImport, id, strings.Join(known, ", "))
}

// DetectAndFind detects the store's imports with the rules (or takes the one
// the user named) and returns all episodes and the chosen one.
func DetectAndFind(ctx context.Context, src Source, r *rules.RuleSet, opts Options, id string) ([]Episode, *Episode, error) {
	var all []Episode
	var err error
	if opts.manual() {
		named, err := Detect(ctx, src, r, opts)
		if err != nil {
			return nil, nil, err
		}
		all, err = Detect(ctx, src, r, Options{})
		if err != nil {
			return nil, nil, err
		}
		if len(named) == 0 {
			return nil, nil, fmt.Errorf("%w: the named changesets or account hold nothing", ErrNoImport)
		}
		return append(all, named[0]), &named[0], nil
	}
	all, err = Detect(ctx, src, r, opts)
	if err != nil {
		return nil, nil, err
	}
	ep, err := Find(all, id)
	if err != nil {
		return nil, nil, err
	}
	return all, ep, nil
}
