package operator

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
)

// DefaultPolicyPath is where the relay, "stopgap operator" and the tuning
// commands look for the administrator's policy when no --policy is given.
// A missing file there means DefaultPolicy; a missing file named explicitly
// is an error.
const DefaultPolicyPath = "/etc/stopgap/policy.json"

// Conservative defaults of the administrator's policy, used when there is no
// policy file and for keys a policy file leaves out. They are design choices
// of this project, not published values:
//
//   - DefaultMaxHorizonMs 500: no predicted frame older than half a second.
//     At 10 m/s that is 5 m driven on a picture that does not show what moved
//     meanwhile; it is below the engine's own cap of 800 ms (the predictor's
//     DefaultMaxAgeMs), so an administrator has to raise it on purpose.
//   - DefaultMinCutoff 0.5: no profile may accept a lower confidence than the
//     engine's default cutoff (a 1-sigma error of about one pedestrian width
//     at 20 m, see the predictor's confidence model). Lowering it means
//     showing predictions the engine itself would not; that is the
//     administrator's decision, taken in the file.
//   - DefaultMaxCutoff 1: an operator may always make prediction stricter,
//     up to never predicting (cutoff 1); turning prediction down is the safe
//     direction.
const (
	DefaultMaxHorizonMs = 500.0
	DefaultMinCutoff    = 0.5
	DefaultMaxCutoff    = 1.0
)

// MaxPolicyBytes caps the size of a policy file.
const MaxPolicyBytes = 64 << 10

// Actor is who makes a change: the operator console of the relay, the
// command line ("stopgap operator") or a tuning run that proposes a cutoff.
type Actor string

// The actors.
const (
	ActorConsole Actor = "console"
	ActorCLI     Actor = "cli"
	ActorTune    Actor = "tune"
)

// Action is what a change does to the store.
type Action string

// The actions, each one a word of a policy file's "allow" lists and of a
// history entry.
const (
	ActionAdd       Action = "add"        // create a profile
	ActionRemove    Action = "remove"     // delete a profile and its history
	ActionSelect    Action = "select"     // make a profile the active one
	ActionCutoff    Action = "cutoff"     // change a profile's cutoff
	ActionLabelSize Action = "label_size" // change the label size preference
	ActionNotes     Action = "notes"      // change the notes
	ActionPropose   Action = "propose"    // record a recommended cutoff (not applied)
	ActionApply     Action = "apply"      // apply a recorded proposal as the cutoff
)

var (
	allActors  = []Actor{ActorConsole, ActorCLI, ActorTune}
	allActions = []Action{ActionAdd, ActionRemove, ActionSelect, ActionCutoff, ActionLabelSize, ActionNotes, ActionPropose, ActionApply}
)

// Policy is the administrator's policy: limits no profile, flag or console
// action may pass. Load it with LoadPolicy; the zero value is not usable,
// DefaultPolicy returns the built-in defaults.
//
// The file is one JSON object; every key is optional and takes its default
// when absent; unknown keys are an error:
//
//	{
//	  "max_horizon_ms": 500,
//	  "min_cutoff": 0.5,
//	  "max_cutoff": 1,
//	  "allow": {
//	    "console": ["select", "cutoff"],
//	    "cli":     ["add", "remove", "select", "cutoff", "label_size", "notes", "apply"],
//	    "tune":    ["propose"]
//	  }
//	}
//
// An actor left out of "allow" keeps its default list; an empty list allows
// it nothing.
type Policy struct {
	// MaxHorizonMs is the longest a predicted frame may be extrapolated past
	// its real frame, milliseconds (> 0).
	MaxHorizonMs float64
	// MinCutoff and MaxCutoff bound every profile's cutoff, inclusive,
	// 0 <= MinCutoff <= MaxCutoff <= 1.
	MinCutoff, MaxCutoff float64
	// Allow lists, per actor, the actions it may take.
	Allow map[Actor][]Action
	// Path is the file the policy was read from; "" for the built-in
	// defaults. Quoted in every refusal.
	Path string
}

// DefaultPolicy returns the built-in conservative policy (see the Default
// constants) with the default "allow" lists shown in the Policy doc.
func DefaultPolicy() Policy {
	return Policy{
		MaxHorizonMs: DefaultMaxHorizonMs,
		MinCutoff:    DefaultMinCutoff,
		MaxCutoff:    DefaultMaxCutoff,
		Allow: map[Actor][]Action{
			ActorConsole: {ActionSelect, ActionCutoff},
			ActorCLI:     {ActionAdd, ActionRemove, ActionSelect, ActionCutoff, ActionLabelSize, ActionNotes, ActionApply},
			ActorTune:    {ActionPropose},
		},
	}
}

// policyFile is the JSON form; pointers tell absent keys from zeros.
type policyFile struct {
	MaxHorizonMs *float64            `json:"max_horizon_ms"`
	MinCutoff    *float64            `json:"min_cutoff"`
	MaxCutoff    *float64            `json:"max_cutoff"`
	Allow        map[string][]string `json:"allow"`
}

// LoadPolicy reads the policy file at path. With explicit false, a missing
// file gives DefaultPolicy (Path ""); otherwise a missing file is an error.
// Errors are *FileError naming the file and, for syntax errors, the line.
func LoadPolicy(path string, explicit bool) (Policy, error) {
	f, err := os.Open(path)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) && !explicit {
			return DefaultPolicy(), nil
		}
		return Policy{}, &FileError{Path: path, Err: fmt.Errorf("cannot read the policy file: %w; give the administrator's policy file with --policy", err)}
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxPolicyBytes+1))
	if err != nil {
		return Policy{}, &FileError{Path: path, Err: err}
	}
	if len(data) > MaxPolicyBytes {
		return Policy{}, &FileError{Path: path, Err: fmt.Errorf("larger than %d bytes; a policy file is a short JSON object", MaxPolicyBytes)}
	}
	return ParsePolicy(path, data)
}

// ParsePolicy decodes a policy file's content; path is only quoted in errors
// and kept in Policy.Path.
func ParsePolicy(path string, data []byte) (Policy, error) {
	var pf policyFile
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&pf); err != nil {
		return Policy{}, &FileError{Path: path, Line: lineOf(data, dec.InputOffset(), err),
			Err: fmt.Errorf("%v; the policy file is one JSON object with max_horizon_ms, min_cutoff, max_cutoff and allow", err)}
	}
	if _, err := dec.Token(); err != io.EOF {
		return Policy{}, &FileError{Path: path, Line: lineOf(data, dec.InputOffset(), nil), Err: errors.New("extra data after the JSON object")}
	}
	p := DefaultPolicy()
	p.Path = path
	bad := func(key, why string) (Policy, error) {
		return Policy{}, &FileError{Path: path, Line: keyLine(data, key), Err: fmt.Errorf("%s: %s", key, why)}
	}
	if pf.MaxHorizonMs != nil {
		p.MaxHorizonMs = *pf.MaxHorizonMs
		if !(p.MaxHorizonMs > 0) || math.IsInf(p.MaxHorizonMs, 0) || p.MaxHorizonMs > 60000 {
			return bad("max_horizon_ms", "must be a number of milliseconds in (0, 60000]")
		}
	}
	if pf.MinCutoff != nil {
		p.MinCutoff = *pf.MinCutoff
	}
	if pf.MaxCutoff != nil {
		p.MaxCutoff = *pf.MaxCutoff
	}
	if !(p.MinCutoff >= 0 && p.MinCutoff <= 1) {
		return bad("min_cutoff", "must be in [0, 1]")
	}
	if !(p.MaxCutoff >= 0 && p.MaxCutoff <= 1) {
		return bad("max_cutoff", "must be in [0, 1]")
	}
	if p.MinCutoff > p.MaxCutoff {
		return bad("min_cutoff", fmt.Sprintf("%g is above max_cutoff %g", p.MinCutoff, p.MaxCutoff))
	}
	for actor, acts := range pf.Allow {
		a := Actor(actor)
		if !slices.Contains(allActors, a) {
			return bad("allow", fmt.Sprintf("unknown actor %q; want console, cli or tune", actor))
		}
		list := make([]Action, 0, len(acts))
		for _, s := range acts {
			act := Action(s)
			if !slices.Contains(allActions, act) {
				return bad("allow", fmt.Sprintf("actor %s: unknown action %q; want one of %s", actor, s, joinActions(allActions)))
			}
			if !slices.Contains(list, act) {
				list = append(list, act)
			}
		}
		p.Allow[a] = list
	}
	return p, nil
}

// MarshalJSON writes the policy in the file format (Path is not written).
func (p Policy) MarshalJSON() ([]byte, error) {
	allow := make(map[string][]string, len(p.Allow))
	for a, acts := range p.Allow {
		l := make([]string, len(acts))
		for i, x := range acts {
			l[i] = string(x)
		}
		allow[string(a)] = l
	}
	return json.Marshal(policyFile{MaxHorizonMs: &p.MaxHorizonMs, MinCutoff: &p.MinCutoff, MaxCutoff: &p.MaxCutoff, Allow: allow})
}

// CheckCutoff returns nil if MinCutoff <= c <= MaxCutoff, else a
// *PolicyError naming min_cutoff or max_cutoff and the file. NaN is refused
// by both.
func (p Policy) CheckCutoff(c float64) error {
	switch {
	case !(c >= p.MinCutoff):
		return &PolicyError{Limit: "min_cutoff", Asked: "cutoff " + fmtFloat(c), Bound: fmtFloat(p.MinCutoff), File: p.Path}
	case !(c <= p.MaxCutoff):
		return &PolicyError{Limit: "max_cutoff", Asked: "cutoff " + fmtFloat(c), Bound: fmtFloat(p.MaxCutoff), File: p.Path}
	}
	return nil
}

// CheckHorizonMs returns nil if 0 <= ms <= MaxHorizonMs, else a
// *PolicyError naming max_horizon_ms and the file.
func (p Policy) CheckHorizonMs(ms float64) error {
	if !(ms >= 0 && ms <= p.MaxHorizonMs) {
		return &PolicyError{Limit: "max_horizon_ms", Asked: "a prediction horizon of " + fmtFloat(ms) + " ms", Bound: fmtFloat(p.MaxHorizonMs), File: p.Path}
	}
	return nil
}

// CheckAllowed returns nil if actor may take act, else a *PolicyError
// naming allow.<actor> and the file.
func (p Policy) CheckAllowed(actor Actor, act Action) error {
	if slices.Contains(p.Allow[actor], act) {
		return nil
	}
	return &PolicyError{Limit: "allow." + string(actor), Asked: "the action " + string(act) + " by the " + string(actor),
		Bound: "[" + joinActions(p.Allow[actor]) + "]", File: p.Path}
}

// CheckProposal is what a tuning run calls before recording a recommended
// cutoff: the tune actor must be allowed to propose, and the cutoff must be
// within the limits.
func (p Policy) CheckProposal(cutoff float64) error {
	if err := p.CheckAllowed(ActorTune, ActionPropose); err != nil {
		return err
	}
	return p.CheckCutoff(cutoff)
}

func joinActions(acts []Action) string {
	s := make([]string, len(acts))
	for i, a := range acts {
		s[i] = string(a)
	}
	return strings.Join(s, ", ")
}

func fmtFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// lineOf returns the 1-based line of a JSON decoding error: the syntax or
// type error's offset when err has one, else off.
func lineOf(data []byte, off int64, err error) int {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	switch {
	case errors.As(err, &se):
		off = se.Offset
	case errors.As(err, &te):
		off = te.Offset
	}
	off = max(0, min(off, int64(len(data))))
	return 1 + bytes.Count(data[:off], []byte{'\n'})
}

// keyLine returns the line of the first `"key"` in data, 0 if absent.
func keyLine(data []byte, key string) int {
	i := bytes.Index(data, []byte(`"`+key+`"`))
	if i < 0 {
		return 0
	}
	return 1 + bytes.Count(data[:i], []byte{'\n'})
}
