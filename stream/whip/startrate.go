package whip

import (
	"fmt"
	"strconv"
	"strings"

	"github.com/pion/sdp/v3"
)

// StartBitrateParam is the VP8 format parameter (on the a=fmtp line, in kbit/s) with which an answer tells
// a Chromium-based sender the bitrate its congestion controller starts from. Chromium reads it from the
// remote description for its own sending side; senders that do not know it ignore it (RFC 8866 section
// 6.15: unknown format parameters are ignored).
const StartBitrateParam = "x-google-start-bitrate"

// withStartBitrate returns the SDP answer with StartBitrateParam=kbps on the fmtp line of every VP8
// payload type of its video sections (replacing a value already there, adding the fmtp line if there is
// none). The WebRTC stack copies the offer's format parameters into its answer and has no way to add one
// of our own (its codec match, codecParametersFuzzySearch, would only decide between an exact and a
// partial match), so the answer is edited after it was applied, on its way to the sender. Other sections and other
// parameters are left as they are.
func withStartBitrate(answer string, kbps int) (string, error) {
	var sd sdp.SessionDescription
	if err := sd.Unmarshal([]byte(answer)); err != nil {
		return "", fmt.Errorf("parse our own answer: %w", err)
	}
	param := StartBitrateParam + "=" + strconv.Itoa(kbps)
	for _, md := range sd.MediaDescriptions {
		if md == nil || md.MediaName.Media != "video" {
			continue
		}
		for _, pt := range vp8PayloadTypes(md) {
			setFormatParam(md, pt, param)
		}
	}
	b, err := sd.Marshal()
	if err != nil {
		return "", fmt.Errorf("write our own answer: %w", err)
	}
	return string(b), nil
}

// vp8PayloadTypes returns the payload types an m-line maps to VP8/90000 with a=rtpmap, in their order.
func vp8PayloadTypes(md *sdp.MediaDescription) []string {
	var pts []string
	for _, a := range md.Attributes {
		if a.Key != "rtpmap" {
			continue
		}
		pt, enc, ok := strings.Cut(a.Value, " ")
		if !ok {
			continue
		}
		name, rest, _ := strings.Cut(enc, "/")
		rate, _, _ := strings.Cut(rest, "/")
		if strings.EqualFold(name, "VP8") && rate == "90000" {
			pts = append(pts, pt)
		}
	}
	return pts
}

// setFormatParam sets param ("key=value") on payload type pt's a=fmtp line of md: it replaces a
// parameter with the same key (compared without case, as the stack compares them), appends it to a line
// without that key, or adds the line after pt's a=rtpmap when there is none.
func setFormatParam(md *sdp.MediaDescription, pt, param string) {
	key, _, _ := strings.Cut(param, "=")
	rtpmapAt := -1
	for i, a := range md.Attributes {
		switch a.Key {
		case "rtpmap":
			if p, _, _ := strings.Cut(a.Value, " "); p == pt {
				rtpmapAt = i
			}
		case "fmtp":
			p, params, _ := strings.Cut(a.Value, " ")
			if p != pt {
				continue
			}
			var kept []string
			for _, f := range strings.Split(params, ";") {
				f = strings.TrimSpace(f)
				k, _, _ := strings.Cut(f, "=")
				if f != "" && !strings.EqualFold(k, key) {
					kept = append(kept, f)
				}
			}
			md.Attributes[i].Value = pt + " " + strings.Join(append(kept, param), ";")
			return
		}
	}
	line := sdp.Attribute{Key: "fmtp", Value: pt + " " + param}
	if rtpmapAt < 0 {
		md.Attributes = append(md.Attributes, line)
		return
	}
	md.Attributes = append(md.Attributes[:rtpmapAt+1], append([]sdp.Attribute{line}, md.Attributes[rtpmapAt+1:]...)...)
}
