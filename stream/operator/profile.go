package operator

import (
	"fmt"
	"math"
	"time"
	"unicode/utf8"

	"stopgap/stream/console"
)

// MaxNotesBytes caps a profile's notes; MaxReasonBytes a change's reason.
const (
	MaxNotesBytes  = 2048
	MaxReasonBytes = 512
)

// LabelSize is an operator's preferred size of the PREDICTED/STALE label
// text. The empty value means LabelNormal.
type LabelSize string

// The label sizes.
const (
	LabelSmall  LabelSize = "small"
	LabelNormal LabelSize = "normal"
	LabelLarge  LabelSize = "large"
)

// ParseLabelSize accepts "small", "normal" or "large".
func ParseLabelSize(s string) (LabelSize, error) {
	switch l := LabelSize(s); l {
	case LabelSmall, LabelNormal, LabelLarge:
		return l, nil
	}
	return "", fmt.Errorf("%w: label size %q; want small, normal or large", ErrBadValue, s)
}

// Profile is one operator's settings and the history of every change made
// to them, oldest first.
type Profile struct {
	// Name identifies the operator; the console's name rules apply
	// (console.ValidProfileName).
	Name string `json:"name"`
	// Cutoff is the confidence at or above which a missing frame is shown
	// PREDICTED, in [0, 1] and within the policy's limits when set.
	Cutoff float64 `json:"cutoff"`
	// LabelSize is the preferred label size ("" = normal).
	LabelSize LabelSize `json:"label_size,omitempty"`
	// Notes is free text (at most MaxNotesBytes).
	Notes string `json:"notes,omitempty"`
	// History lists every change, oldest first; Seq numbers run 1, 2, ...
	History []Change `json:"history,omitempty"`
}

// Change is one entry of a profile's history.
type Change struct {
	// Seq numbers the profile's changes from 1, in order.
	Seq int `json:"seq"`
	// Time is when the change was stored (UTC, RFC 3339 in the file).
	Time time.Time `json:"time"`
	// Actor made the change; User, when known, is the account behind it
	// (the login name for the command line).
	Actor Actor  `json:"actor"`
	User  string `json:"user,omitempty"`
	// Action is what changed; From and To are the old and new values as text
	// ("" for none).
	Action Action `json:"action"`
	From   string `json:"from,omitempty"`
	To     string `json:"to,omitempty"`
	// Reason is the free-text why; Run names the tuning run that
	// recommended the value, if any.
	Reason string `json:"reason,omitempty"`
	Run    string `json:"run,omitempty"`
	// Proposal, for ActionApply, is the Seq of the proposal applied.
	Proposal int `json:"proposal,omitempty"`
}

// validCutoff reports a cutoff outside [0, 1] or not a number.
func validCutoff(c float64) error {
	if math.IsNaN(c) || c < 0 || c > 1 {
		return fmt.Errorf("%w: cutoff %v; a cutoff is a confidence in [0, 1]", ErrBadValue, c)
	}
	return nil
}

func validText(what, s string, maxBytes int) error {
	if len(s) > maxBytes {
		return fmt.Errorf("%w: %s is %d bytes, at most %d", ErrBadValue, what, len(s), maxBytes)
	}
	if !utf8.ValidString(s) {
		return fmt.Errorf("%w: %s is not valid UTF-8", ErrBadValue, what)
	}
	return nil
}

// validate checks one profile as read from or about to be written to the
// store.
func (p *Profile) validate() error {
	if err := console.ValidProfileName(p.Name); err != nil {
		return fmt.Errorf("%w: %w", ErrBadValue, err)
	}
	if err := validCutoff(p.Cutoff); err != nil {
		return fmt.Errorf("profile %q: %w", p.Name, err)
	}
	if p.LabelSize != "" {
		if _, err := ParseLabelSize(string(p.LabelSize)); err != nil {
			return fmt.Errorf("profile %q: %w", p.Name, err)
		}
	}
	if err := validText("notes", p.Notes, MaxNotesBytes); err != nil {
		return fmt.Errorf("profile %q: %w", p.Name, err)
	}
	for i, c := range p.History {
		if c.Seq != i+1 {
			return fmt.Errorf("%w: profile %q: history entry %d has seq %d, want %d", ErrBadValue, p.Name, i+1, c.Seq, i+1)
		}
		if !containsActor(c.Actor) || !containsAction(c.Action) {
			return fmt.Errorf("%w: profile %q: history entry %d: unknown actor %q or action %q", ErrBadValue, p.Name, c.Seq, c.Actor, c.Action)
		}
		if err := validText("reason", c.Reason, MaxReasonBytes); err != nil {
			return fmt.Errorf("profile %q: history entry %d: %w", p.Name, c.Seq, err)
		}
		for _, s := range []string{c.User, c.From, c.To, c.Run} {
			if err := validText("history field", s, MaxReasonBytes); err != nil {
				return fmt.Errorf("profile %q: history entry %d: %w", p.Name, c.Seq, err)
			}
		}
	}
	return nil
}

// LastProposal returns the newest ActionPropose entry, if any.
func (p *Profile) LastProposal() (Change, bool) {
	for i := len(p.History) - 1; i >= 0; i-- {
		if p.History[i].Action == ActionPropose {
			return p.History[i], true
		}
	}
	return Change{}, false
}

func containsActor(a Actor) bool {
	for _, x := range allActors {
		if x == a {
			return true
		}
	}
	return false
}

func containsAction(a Action) bool {
	for _, x := range allActions {
		if x == a {
			return true
		}
	}
	return false
}
