package consoletest

import (
	"fmt"
	"strings"

	"stopgap/internal/vocab"
)

// Box is an element's layout box in CSS pixels, with its computed
// visibility.
type Box struct {
	Top, Bottom, Left, Right float64
	Display, Visibility      string
	Opacity                  string
	Text                     string
	ViewportW, ViewportH     float64
	// OnTop is true when the element (or a descendant) is what the browser
	// hit-tests at the box centre, so nothing covers it.
	OnTop bool
}

// ElementBox returns the box of the element with the given id.
func (b *Browser) ElementBox(id string) (Box, error) {
	var box Box
	err := b.Eval(`(() => {
		const el = document.getElementById(`+jsString(id)+`);
		if (!el) return null;
		const r = el.getBoundingClientRect(), cs = getComputedStyle(el);
		const hit = document.elementFromPoint((r.left + r.right) / 2, (r.top + r.bottom) / 2);
		return {Top: r.top, Bottom: r.bottom, Left: r.left, Right: r.right, Display: cs.display,
			Visibility: cs.visibility, Opacity: cs.opacity, Text: el.innerText,
			ViewportW: innerWidth, ViewportH: innerHeight, OnTop: !!hit && el.contains(hit)};
	})()`, &box)
	if err != nil {
		return Box{}, err
	}
	if box.Display == "" {
		return Box{}, fmt.Errorf("consoletest: no element #%s", id)
	}
	return box, nil
}

// CheckCautionVisible returns an error unless the safety caution (#caution)
// is displayed, opaque, uncovered, entirely inside the viewport and says
// the shared caution of package vocab, word for word.
func (b *Browser) CheckCautionVisible() error {
	box, err := b.ElementBox("caution")
	if err != nil {
		return err
	}
	switch {
	case box.Display == "none" || box.Visibility != "visible" || box.Opacity != "1":
		return fmt.Errorf("consoletest: caution hidden: display %s visibility %s opacity %s", box.Display, box.Visibility, box.Opacity)
	case box.Top < 0 || box.Left < 0 || box.Bottom > box.ViewportH || box.Right > box.ViewportW:
		return fmt.Errorf("consoletest: caution box %+v not inside the %vx%v viewport", box, box.ViewportW, box.ViewportH)
	case box.Bottom-box.Top < 40:
		return fmt.Errorf("consoletest: caution only %v px high", box.Bottom-box.Top)
	case !box.OnTop:
		return fmt.Errorf("consoletest: something covers the caution")
	}
	if got, want := strings.Join(strings.Fields(box.Text), " "), vocab.CautionTitle+" "+vocab.Caution; got != want {
		return fmt.Errorf("consoletest: caution text %q, want the shared caution %q", got, want)
	}
	return nil
}

// BannerText returns the state banner's text as displayed.
func (b *Browser) BannerText() (string, error) {
	var s string
	err := b.Eval(`document.getElementById("banner").innerText.replace(/\s+/g, " ").trim()`, &s)
	return s, err
}

// jsString quotes s as a JavaScript string literal.
func jsString(s string) string {
	var sb strings.Builder
	sb.WriteByte('"')
	for _, r := range s {
		switch {
		case r == '"' || r == '\\':
			sb.WriteByte('\\')
			sb.WriteRune(r)
		case r < 0x20 || r == 0x2028 || r == 0x2029:
			fmt.Fprintf(&sb, `\u%04x`, r)
		default:
			sb.WriteRune(r)
		}
	}
	sb.WriteByte('"')
	return sb.String()
}
