package whip

import (
	"fmt"
	"slices"
	"strings"

	"github.com/pion/sdp/v3"
)

// checkOffer parses an SDP offer (RFC 8866) and checks what this server needs before any WebRTC resources are
// allocated: exactly one active video m-line (port not 0) using an RTP profile, offering VP8 at 90 kHz
// (RFC 7741 section 6.1), in a direction in which the vehicle sends (sendonly or sendrecv; absent means
// sendrecv, RFC 8866 section 6.7). Audio and data m-lines are allowed; audio is refused in the answer because
// no audio codec is registered. Errors wrap ErrBadOffer and say what is wrong.
func checkOffer(body []byte) error {
	if len(body) == 0 {
		return fmt.Errorf("%w: empty body; send the SDP offer as the POST body", ErrBadOffer)
	}
	var sd sdp.SessionDescription
	if err := sd.Unmarshal(body); err != nil {
		return fmt.Errorf("%w: cannot parse SDP: %v", ErrBadOffer, err)
	}
	sessionDir := direction(sd.Attributes)
	videos := 0
	var vp8 bool
	var dir string
	for _, md := range sd.MediaDescriptions {
		if md == nil || md.MediaName.Media != "video" || md.MediaName.Port.Value == 0 {
			continue
		}
		videos++
		if !hasRTPProto(md.MediaName.Protos) {
			return fmt.Errorf("%w: video m-line uses protocol %q, want UDP/TLS/RTP/SAVPF",
				ErrBadOffer, strings.Join(md.MediaName.Protos, "/"))
		}
		vp8 = offersVP8(md)
		dir = direction(md.Attributes)
		if dir == "" {
			dir = sessionDir
		}
	}
	switch {
	case videos == 0:
		return fmt.Errorf("%w: no video m-line; the offer must carry one VP8 video track", ErrBadOffer)
	case videos > 1:
		return fmt.Errorf("%w: %d video m-lines; this server takes exactly one VP8 video track", ErrBadOffer, videos)
	case !vp8:
		return fmt.Errorf("%w: the video m-line does not offer VP8/90000; only VP8 (RFC 7741) is accepted", ErrBadOffer)
	case dir == "recvonly" || dir == "inactive":
		return fmt.Errorf("%w: video direction is %s; the publisher must send (sendonly)", ErrBadOffer, dir)
	}
	return nil
}

// direction returns the direction attribute among attrs, or "" if none.
func direction(attrs []sdp.Attribute) string {
	for _, a := range attrs {
		switch a.Key {
		case "sendonly", "recvonly", "sendrecv", "inactive":
			return a.Key
		}
	}
	return ""
}

func hasRTPProto(protos []string) bool {
	for _, p := range protos {
		if p == "RTP" {
			return true
		}
	}
	return false
}

// offersVP8 reports whether an m-line maps one of its payload formats to VP8/90000 via a=rtpmap.
func offersVP8(md *sdp.MediaDescription) bool {
	for _, pt := range vp8PayloadTypes(md) {
		if slices.Contains(md.MediaName.Formats, pt) {
			return true
		}
	}
	return false
}
