package cli

import (
	"context"
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/study"
)

// AddTreatmentFlags adds --treatment and --event-name to the commands whose
// study may follow an event given as data (panel, audit, report).
func (s *StudyFlags) AddTreatmentFlags(cmd *cobra.Command) {
	f := cmd.Flags()
	f.StringVar(&s.Treatment, "treatment", "", "`FILE` of treated units and their first treated months (CSV unit,start or GeoJSON with a start property) instead of import detection")
	f.StringVar(&s.EventName, "event-name", "", "what the reports call the event of --treatment (default: the file's event column or name, else its base name)")
	cmd.RegisterFlagCompletionFunc("treatment", cobra.FixedCompletions(nil, cobra.ShellCompDirectiveDefault))
}

// checkTreatment refuses --treatment together with a way of naming an
// import, and --event-name without --treatment.
func (s *StudyFlags) checkTreatment() error {
	switch {
	case s.Treatment != "" && (s.ImportID != "" || s.Changesets != "" || s.Account != ""):
		return Usagef("--treatment gives the treated units itself: leave out --import, --changesets and --account")
	case s.EventName != "" && s.Treatment == "":
		return Usagef("--event-name names the event of --treatment: give --treatment FILE too")
	}
	return nil
}

// readTreatment reads the assignment of --treatment.
func (s *StudyFlags) readTreatment() (*study.Assignment, error) {
	f, err := os.Open(s.Treatment)
	if err != nil {
		return nil, fmt.Errorf("treatment file: %w", err)
	}
	defer f.Close()
	col := ""
	if s.UnitID != "id" {
		col = s.UnitID
	}
	return study.ReadAssignment(f, s.Treatment, study.ReadOptions{UnitColumn: col, Event: s.EventName})
}

// openTreatment fills in for --treatment: the assignment, and every detected
// import as an other import (its changesets left out of the outcomes, the
// units it edited kept out of the controls).
func (s *StudyFlags) openTreatment(cmd *cobra.Command, g *Globals, in *StudyInputs) error {
	a, err := s.readTreatment()
	if err != nil {
		return err
	}
	in.Assignment = a
	done := NewProgress(cmd, g).Step("find imports (kept out of the comparison)")
	in.All, err = episode.Detect(cmd.Context(), in.Store, in.Rules, episode.Options{})
	done()
	return err
}

// Label names what the study follows, for progress lines.
func (in *StudyInputs) Label() string {
	if in.Assignment != nil {
		return in.Assignment.Event
	}
	return in.Episode.ID
}

// BuildStudy builds the study of the inputs: the assignment's, or the
// import's with the other detected imports kept out of the controls.
func (in *StudyInputs) BuildStudy(ctx context.Context, so study.Options) (*study.Study, error) {
	if in.Assignment != nil {
		so.OtherImports = append(so.OtherImports, study.OtherChangesets("", in.All)...)
		return study.BuildAssigned(ctx, in.Store, in.Assignment, in.Units, so)
	}
	return study.ForEpisode(ctx, in.Store, in.Episode, in.All, in.Units, so)
}
