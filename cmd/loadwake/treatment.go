package main

import (
	"context"
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/study"
)

// addTreatmentFlags adds --treatment and --event-name to the commands whose
// study may follow an event given as data (panel, audit, report).
func (s *studyFlags) addTreatmentFlags(cmd *cobra.Command) {
	f := cmd.Flags()
	f.StringVar(&s.treatment, "treatment", "", "`FILE` of treated units and their first treated months (CSV unit,start or GeoJSON with a start property) instead of import detection")
	f.StringVar(&s.eventName, "event-name", "", "what the reports call the event of --treatment (default: the file's event column or name, else its base name)")
	cmd.RegisterFlagCompletionFunc("treatment", cobra.FixedCompletions(nil, cobra.ShellCompDirectiveDefault))
}

// checkTreatment refuses --treatment together with a way of naming an
// import, and --event-name without --treatment.
func (s *studyFlags) checkTreatment() error {
	switch {
	case s.treatment != "" && (s.importID != "" || s.changesets != "" || s.account != ""):
		return usagef("--treatment gives the treated units itself: leave out --import, --changesets and --account")
	case s.eventName != "" && s.treatment == "":
		return usagef("--event-name names the event of --treatment: give --treatment FILE too")
	}
	return nil
}

// readTreatment reads the assignment of --treatment.
func (s *studyFlags) readTreatment() (*study.Assignment, error) {
	f, err := os.Open(s.treatment)
	if err != nil {
		return nil, fmt.Errorf("treatment file: %w", err)
	}
	defer f.Close()
	col := ""
	if s.unitID != "id" {
		col = s.unitID
	}
	return study.ReadAssignment(f, s.treatment, study.ReadOptions{UnitColumn: col, Event: s.eventName})
}

// openTreatment fills in for --treatment: the assignment, and every detected
// import as an other import (its changesets left out of the outcomes, the
// units it edited kept out of the controls).
func (s *studyFlags) openTreatment(cmd *cobra.Command, g *globalOptions, in *studyInputs) error {
	a, err := s.readTreatment()
	if err != nil {
		return err
	}
	in.assignment = a
	done := newProgress(cmd, g).step("find imports (kept out of the comparison)")
	in.all, err = episode.Detect(cmd.Context(), in.store, in.rules, episode.Options{})
	done()
	return err
}

// label names what the study follows, for progress lines.
func (in *studyInputs) label() string {
	if in.assignment != nil {
		return in.assignment.Event
	}
	return in.episode.ID
}

// buildStudy builds the study of the inputs: the assignment's, or the
// import's with the other detected imports kept out of the controls.
func (in *studyInputs) buildStudy(ctx context.Context, so study.Options) (*study.Study, error) {
	if in.assignment != nil {
		so.OtherImports = append(so.OtherImports, study.OtherChangesets("", in.all)...)
		return study.BuildAssigned(ctx, in.store, in.assignment, in.units, so)
	}
	return study.ForEpisode(ctx, in.store, in.episode, in.all, in.units, so)
}
