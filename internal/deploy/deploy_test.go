package deploy

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/resource"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/intstr"
	kjson "sigs.k8s.io/json"
	"sigs.k8s.io/yaml"

	"stopgap/bench"
	"stopgap/internal/camera"
	"stopgap/stream/relay"
)

// measuredCPU is the CPU request of one relay: the project's last
// measurement of one 1280x720 30 fps stream, about 0.85 cores for relay,
// simulated vehicle and viewer together (loopback benchmark), not
// re-measured by this test.
const measuredCPU = "850m"

// strictDecode decodes one YAML document as the API server's strict field
// validation does: YAML to JSON rejecting duplicate keys, then
// sigs.k8s.io/json's case-sensitive decoder rejecting unknown and
// duplicate fields (encoding/json alone would accept "readOnlyRootFileSystem"
// for readOnlyRootFilesystem: it matches names case-insensitively).
func strictDecode(doc []byte, obj any) error {
	js, err := yaml.YAMLToJSONStrict(doc)
	if err != nil {
		return err
	}
	strict, err := kjson.UnmarshalStrict(js, obj, kjson.DisallowDuplicateFields, kjson.DisallowUnknownFields)
	if err != nil {
		return err
	}
	if len(strict) > 0 {
		return errors.Join(strict...)
	}
	return nil
}

// manifests decodes every document of file strictly (strictDecode) into
// its API type.
func manifests(t *testing.T, file string) (secrets []corev1.Secret, cms []corev1.ConfigMap, deps []appsv1.Deployment, svcs []corev1.Service, jobs []batchv1.Job) {
	t.Helper()
	data, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	docs := regexp.MustCompile(`(?m)^---\s*$`).Split(string(data), -1)
	for i, doc := range docs {
		if strings.TrimSpace(doc) == "" {
			continue
		}
		var tm metav1.TypeMeta
		if err := yaml.Unmarshal([]byte(doc), &tm); err != nil {
			t.Fatalf("%s document %d: %v", file, i, err)
		}
		var obj any
		switch tm.APIVersion + "/" + tm.Kind {
		case "v1/Secret":
			secrets = append(secrets, corev1.Secret{})
			obj = &secrets[len(secrets)-1]
		case "v1/ConfigMap":
			cms = append(cms, corev1.ConfigMap{})
			obj = &cms[len(cms)-1]
		case "apps/v1/Deployment":
			deps = append(deps, appsv1.Deployment{})
			obj = &deps[len(deps)-1]
		case "v1/Service":
			svcs = append(svcs, corev1.Service{})
			obj = &svcs[len(svcs)-1]
		case "batch/v1/Job":
			jobs = append(jobs, batchv1.Job{})
			obj = &jobs[len(jobs)-1]
		default:
			t.Fatalf("%s document %d: unexpected %s %s", file, i, tm.APIVersion, tm.Kind)
		}
		if err := strictDecode([]byte(doc), obj); err != nil {
			t.Fatalf("%s document %d (%s): strict decoding: %v", file, i, tm.Kind, err)
		}
	}
	return
}

func TestRelayManifests(t *testing.T) {
	secrets, cms, deps, svcs, jobs := manifests(t, filepath.Join("k8s", "relay.yaml"))
	if len(secrets) != 1 || len(cms) != 1 || len(deps) != 1 || len(svcs) != 1 || len(jobs) != 0 {
		t.Fatalf("want one Secret, ConfigMap, Deployment and Service; got %d %d %d %d and %d Jobs", len(secrets), len(cms), len(deps), len(svcs), len(jobs))
	}
	d := deps[0]
	if d.Spec.Replicas == nil || *d.Spec.Replicas != 1 || d.Spec.Strategy.Type != appsv1.RecreateDeploymentStrategyType {
		t.Errorf("one vehicle per pod needs replicas 1 and the Recreate strategy; got %v, %q", d.Spec.Replicas, d.Spec.Strategy.Type)
	}
	pod := d.Spec.Template.Spec
	for k, v := range d.Spec.Selector.MatchLabels {
		if d.Spec.Template.Labels[k] != v {
			t.Errorf("selector %s=%s does not match the pod labels", k, v)
		}
	}
	checkPodSecurity(t, pod)
	if len(pod.Containers) != 1 {
		t.Fatalf("%d containers, want the relay alone", len(pod.Containers))
	}
	c := pod.Containers[0]

	t.Run("probes", func(t *testing.T) {
		ports := map[string]int32{}
		for _, p := range c.Ports {
			ports[p.Name] = p.ContainerPort
		}
		for _, p := range []struct {
			name  string
			probe *corev1.Probe
			path  string
		}{
			{"startupProbe", c.StartupProbe, relay.ReadyPath},
			{"readinessProbe", c.ReadinessProbe, relay.ReadyPath},
			{"livenessProbe", c.LivenessProbe, relay.LivePath},
		} {
			if p.probe == nil || p.probe.HTTPGet == nil {
				t.Errorf("%s: missing or not an HTTP GET", p.name)
				continue
			}
			g := p.probe.HTTPGet
			if g.Path != p.path {
				t.Errorf("%s: path %q, want the relay's %q", p.name, g.Path, p.path)
			}
			if g.Port.Type != intstr.String || ports[g.Port.StrVal] == 0 {
				t.Errorf("%s: port %v is not a named container port", p.name, g.Port.String())
			}
			if g.Scheme != corev1.URISchemeHTTPS || !hasArg(c.Args, "--tls-cert=") {
				t.Errorf("%s: scheme %q; off loopback the relay serves HTTPS only", p.name, g.Scheme)
			}
		}
		// The liveness probe must not kill the relay before the relay
		// itself would call the display loop stuck.
		if lp := c.LivenessProbe; lp != nil && int64(lp.PeriodSeconds*lp.FailureThreshold) < int64(relay.LivenessTimeout.Seconds()) {
			t.Errorf("liveness gives up after %d s, before the relay's own %v", lp.PeriodSeconds*lp.FailureThreshold, relay.LivenessTimeout)
		}
	})

	t.Run("resources", func(t *testing.T) {
		cpu := c.Resources.Requests[corev1.ResourceCPU]
		if cpu.Cmp(resource.MustParse(measuredCPU)) != 0 {
			t.Errorf("cpu request %s, want the measured %s per stream", cpu.String(), measuredCPU)
		}
		mem, ok := c.Resources.Requests[corev1.ResourceMemory]
		if !ok || mem.IsZero() {
			t.Error("no memory request")
		}
		lim, ok := c.Resources.Limits[corev1.ResourceMemory]
		if !ok || lim.Cmp(mem) < 0 {
			t.Errorf("memory limit %v must be set and at least the request %v", lim.String(), mem.String())
		}
	})

	t.Run("security context", func(t *testing.T) { checkContainerSecurity(t, c) })

	t.Run("secret, config map and mounts", func(t *testing.T) {
		sec := secrets[0]
		for _, key := range []string{"ingest", "console"} {
			if _, ok := sec.StringData[key]; !ok {
				t.Errorf("token Secret lacks key %q", key)
			}
		}
		mounts := map[string]string{} // volume -> mount path
		for _, m := range c.VolumeMounts {
			mounts[m.Name] = m.MountPath
		}
		vols := map[string]corev1.Volume{}
		for _, v := range pod.Volumes {
			vols[v.Name] = v
		}
		tok := vols["tokens"]
		if tok.Secret == nil || tok.Secret.SecretName != sec.Name {
			t.Errorf("volume tokens does not mount the Secret %s", sec.Name)
		}
		cm := vols["camera"]
		if cm.ConfigMap == nil || cm.ConfigMap.Name != cms[0].Name {
			t.Errorf("volume camera does not mount the ConfigMap %s", cms[0].Name)
		}
		if js, ok := cms[0].Data["camera.json"]; !ok {
			t.Error("the ConfigMap has no camera.json")
		} else if _, err := camera.Decode("relay.yaml camera.json", []byte(js)); err != nil {
			// The relay reads it with the one strict reader at start-up.
			t.Errorf("the ConfigMap's camera.json would stop the relay: %v", err)
		}
		for flag, want := range map[string]string{
			"--token-file=":         mounts["tokens"] + "/ingest",
			"--console-token-file=": mounts["tokens"] + "/console",
			"--camera=":             mounts["camera"] + "/camera.json",
			"--tls-cert=":           mounts["tls"] + "/tls.crt",
			"--tls-key=":            mounts["tls"] + "/tls.key",
		} {
			if got := argValue(c.Args, flag); got != want {
				t.Errorf("%s%s, want %s (a mounted file)", flag, got, want)
			}
		}
		for name, m := range mounts {
			if name != "tmp" && !isReadOnly(c.VolumeMounts, name) {
				t.Errorf("volume %s mounted at %s is writable", name, m)
			}
		}
	})

	t.Run("service", func(t *testing.T) {
		s := svcs[0]
		for k, v := range s.Spec.Selector {
			if d.Spec.Template.Labels[k] != v {
				t.Errorf("Service selector %s=%s matches no pod label", k, v)
			}
		}
		if len(s.Spec.Ports) != 1 || s.Spec.Ports[0].TargetPort.StrVal != "https" {
			t.Errorf("Service ports %v: want one, to the named container port https", s.Spec.Ports)
		}
	})
}

// TestStrictDecodingCatchesTypos makes sure the decoding above would fail on
// a misspelt field: the check that gives the manifests test its teeth.
func TestStrictDecodingCatchesTypos(t *testing.T) {
	data, err := os.ReadFile(filepath.Join("k8s", "relay.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	bad := bytes.Replace(data, []byte("readOnlyRootFilesystem: true"), []byte("readOnlyRootFileSystem: true"), 1)
	for _, doc := range regexp.MustCompile(`(?m)^---\s*$`).Split(string(bad), -1) {
		if !strings.Contains(doc, "kind: Deployment") {
			continue
		}
		var d appsv1.Deployment
		if err := strictDecode([]byte(doc), &d); err == nil || !strings.Contains(err.Error(), "readOnlyRootFileSystem") {
			t.Fatalf("strict decoding accepted a misspelt field: %v", err)
		}
		return
	}
	t.Fatal("no Deployment found")
}

// checkPodSecurity checks the pod-level hardening every manifest shares:
// no API token, a non-root user, the RuntimeDefault seccomp profile.
func checkPodSecurity(t *testing.T, pod corev1.PodSpec) {
	t.Helper()
	if pod.AutomountServiceAccountToken == nil || *pod.AutomountServiceAccountToken {
		t.Error("stopgap needs no Kubernetes API token: set automountServiceAccountToken: false")
	}
	psc := pod.SecurityContext
	if psc == nil || psc.RunAsNonRoot == nil || !*psc.RunAsNonRoot || psc.RunAsUser == nil || *psc.RunAsUser == 0 {
		t.Error("pod securityContext must run as a non-root user")
	}
	if psc == nil || psc.SeccompProfile == nil || psc.SeccompProfile.Type != corev1.SeccompProfileTypeRuntimeDefault {
		t.Error("pod securityContext must use the RuntimeDefault seccomp profile")
	}
}

// checkContainerSecurity checks the container's securityContext: non-root,
// read-only root file system, no privilege escalation, no capabilities.
func checkContainerSecurity(t *testing.T, c corev1.Container) {
	t.Helper()
	sc := c.SecurityContext
	if sc == nil {
		t.Fatal("no container securityContext")
	}
	if sc.RunAsNonRoot == nil || !*sc.RunAsNonRoot {
		t.Error("runAsNonRoot must be true")
	}
	if sc.ReadOnlyRootFilesystem == nil || !*sc.ReadOnlyRootFilesystem {
		t.Error("readOnlyRootFilesystem must be true")
	}
	if sc.AllowPrivilegeEscalation == nil || *sc.AllowPrivilegeEscalation {
		t.Error("allowPrivilegeEscalation must be false")
	}
	if sc.Privileged != nil && *sc.Privileged {
		t.Error("privileged must be false")
	}
	if sc.Capabilities == nil || len(sc.Capabilities.Drop) != 1 || sc.Capabilities.Drop[0] != "ALL" || len(sc.Capabilities.Add) != 0 {
		t.Error("capabilities must drop ALL and add none")
	}
}

func hasArg(args []string, prefix string) bool { return argValue(args, prefix) != "" }

func argValue(args []string, prefix string) string {
	for _, a := range args {
		if v, ok := strings.CutPrefix(a, prefix); ok {
			return v
		}
	}
	return ""
}

func isReadOnly(ms []corev1.VolumeMount, name string) bool {
	for _, m := range ms {
		if m.Name == name {
			return m.ReadOnly
		}
	}
	return false
}

// TestSystemdUnit verifies the unit with systemd-analyze (skipped when
// systemd is not installed) and checks that its sandboxing options are set.
func TestSystemdUnit(t *testing.T) {
	data, err := os.ReadFile("stopgap-relay.service")
	if err != nil {
		t.Fatal(err)
	}
	for _, opt := range []string{
		"DynamicUser=yes", "NoNewPrivileges=yes", "ProtectSystem=strict", "ProtectHome=yes",
		"PrivateTmp=yes", "PrivateDevices=yes", "CapabilityBoundingSet=\n", "RestrictAddressFamilies=",
		"SystemCallFilter=@system-service", "LoadCredential=ingest.token:", "LoadCredential=console.token:",
	} {
		if !bytes.Contains(data, []byte(opt)) {
			t.Errorf("the unit lacks %q", strings.TrimSpace(opt))
		}
	}
	if !bytes.Contains(data, []byte("--token-file=%d/")) {
		t.Error("the ingest token must come from the credentials directory")
	}
	analyze, err := exec.LookPath("systemd-analyze")
	if err != nil {
		t.Skip("systemd-analyze not installed: unit syntax not verified")
	}
	// verify also checks that ExecStart's binary exists: point it at one
	// that does, the unit is otherwise unchanged.
	unit := bytes.Replace(data, []byte("ExecStart=/usr/local/bin/stopgap"), []byte("ExecStart=/bin/true"), 1)
	path := filepath.Join(t.TempDir(), "stopgap-relay.service")
	if err := os.WriteFile(path, unit, 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(analyze, "verify", path).CombinedOutput()
	if err != nil || len(bytes.TrimSpace(out)) > 0 {
		t.Fatalf("systemd-analyze verify: %v\n%s", err, out)
	}
}

// TestDockerfileUsesDevPackages checks the image installs its build
// packages through ./dev.sh (one list) and runs as a non-root user.
func TestDockerfileUsesDevPackages(t *testing.T) {
	data, err := os.ReadFile("Dockerfile")
	if err != nil {
		t.Fatal(err)
	}
	s := string(data)
	for _, want := range []string{"FROM golang:1.26-bookworm", "RUN ./dev.sh deps", "FROM debian:12-slim", "USER 65532:65532"} {
		if !strings.Contains(s, want) {
			t.Errorf("Dockerfile lacks %q", want)
		}
	}
	if _, err := os.Stat(filepath.Join("..", "..", "dev.sh")); err != nil {
		t.Fatalf("dev.sh not found where the Dockerfile copies it from: %v", err)
	}
}

// TestReplayJobManifests checks the Indexed Job that replays a drive list
// in shards and the Job that merges them: strict decoding, one pod per
// shard with the shard count in the arguments, the index left to
// JOB_COMPLETION_INDEX, the drive list parseable by stopgap's own reader
// and on the read-only drives volume, the merge naming every shard's
// output, and the same hardening as the relay.
func TestReplayJobManifests(t *testing.T) {
	_, cms, deps, _, jobs := manifests(t, filepath.Join("k8s", "replay-job.yaml"))
	if len(cms) != 1 || len(jobs) != 1 || len(deps) != 0 {
		t.Fatalf("want one ConfigMap and one Job; got %d ConfigMaps, %d Jobs, %d Deployments", len(cms), len(jobs), len(deps))
	}
	_, mcms, _, _, mjobs := manifests(t, filepath.Join("k8s", "replay-merge-job.yaml"))
	if len(mjobs) != 1 || len(mcms) != 0 {
		t.Fatalf("want one merge Job; got %d Jobs, %d ConfigMaps", len(mjobs), len(mcms))
	}
	job, merge := jobs[0], mjobs[0]
	spec := job.Spec
	if spec.CompletionMode == nil || *spec.CompletionMode != batchv1.IndexedCompletion {
		t.Fatalf("completionMode %v, want Indexed (each pod gets JOB_COMPLETION_INDEX)", spec.CompletionMode)
	}
	if spec.Completions == nil || *spec.Completions < 1 {
		t.Fatal("completions must be the shard count")
	}
	shards := int(*spec.Completions)
	if spec.Parallelism != nil && (*spec.Parallelism < 1 || int(*spec.Parallelism) > shards) {
		t.Errorf("parallelism %d outside [1, %d]", *spec.Parallelism, shards)
	}
	for _, j := range []batchv1.Job{job, merge} {
		t.Run(j.Name, func(t *testing.T) {
			pod := j.Spec.Template.Spec
			if pod.RestartPolicy != corev1.RestartPolicyNever {
				t.Errorf("restartPolicy %q, want Never: a retried shard starts afresh in a new pod", pod.RestartPolicy)
			}
			checkPodSecurity(t, pod)
			if len(pod.Containers) != 1 {
				t.Fatalf("%d containers, want one", len(pod.Containers))
			}
			c := pod.Containers[0]
			checkContainerSecurity(t, c)
			mem, ok := c.Resources.Requests[corev1.ResourceMemory]
			lim, lok := c.Resources.Limits[corev1.ResourceMemory]
			if _, cok := c.Resources.Requests[corev1.ResourceCPU]; !cok || !ok || !lok || lim.Cmp(mem) < 0 {
				t.Errorf("resources %v: want CPU and memory requests and a memory limit >= the request", c.Resources)
			}
			vols := map[string]corev1.Volume{}
			for _, v := range pod.Volumes {
				vols[v.Name] = v
			}
			for _, m := range c.VolumeMounts {
				if _, ok := vols[m.Name]; !ok {
					t.Errorf("mount %s names no volume", m.Name)
				}
			}
		})
	}

	c := spec.Template.Spec.Containers[0]
	mounts := map[string]string{}
	for _, m := range c.VolumeMounts {
		mounts[m.Name] = m.MountPath
	}
	if len(c.Args) == 0 || c.Args[0] != "replay" {
		t.Fatalf("args %v: want the replay command", c.Args)
	}
	if got := argValue(c.Args, "--shard-count="); got != fmt.Sprint(shards) {
		t.Errorf("--shard-count=%s, want the Job's %d completions", got, shards)
	}
	if hasArg(c.Args, "--shard-index=") {
		t.Error("--shard-index is set; the index must come from JOB_COMPLETION_INDEX")
	}
	var annotated bool
	for _, e := range c.Env {
		if e.Name == "JOB_COMPLETION_INDEX" {
			t.Error("JOB_COMPLETION_INDEX is set by the Job controller; do not override it")
		}
		if e.Name == "SHARD_INDEX" && e.ValueFrom != nil && e.ValueFrom.FieldRef != nil &&
			e.ValueFrom.FieldRef.FieldPath == "metadata.annotations['batch.kubernetes.io/job-completion-index']" {
			annotated = true
		}
	}
	if !annotated {
		t.Error("SHARD_INDEX must come from the pod's completion-index annotation")
	}
	out := argValue(c.Args, "--out=")
	if !strings.Contains(out, "$(SHARD_INDEX)") {
		t.Errorf("--out=%s: each shard needs its own directory, $(SHARD_INDEX) in it", out)
	}
	if !strings.HasPrefix(out, mounts["results"]+"/") || isReadOnly(c.VolumeMounts, "results") {
		t.Errorf("--out=%s is not on the writable results volume (%s)", out, mounts["results"])
	}
	for _, ro := range []string{"drives", "drives-list"} {
		if !isReadOnly(c.VolumeMounts, ro) {
			t.Errorf("volume %s must be mounted read-only", ro)
		}
	}
	if got, want := argValue(c.Args, "--drives-file="), mounts["drives-list"]+"/drives.txt"; got != want {
		t.Errorf("--drives-file=%s, want %s (the mounted ConfigMap)", got, want)
	}
	list, err := bench.ReadDriveList(strings.NewReader(cms[0].Data["drives.txt"]), "drives.txt")
	if err != nil {
		t.Fatalf("the ConfigMap's drive list: %v", err)
	}
	for _, d := range list {
		if !strings.HasPrefix(d, mounts["drives"]+"/") {
			t.Errorf("drive %s is not on the drives volume (%s)", d, mounts["drives"])
		}
	}

	// The merge reads every shard's output, each once, from the same volume.
	mc := merge.Spec.Template.Spec.Containers[0]
	if len(mc.Args) == 0 || mc.Args[0] != "merge" {
		t.Fatalf("merge args %v: want the merge command", mc.Args)
	}
	var got []string
	for _, a := range mc.Args {
		if v, ok := strings.CutPrefix(a, "--shard="); ok {
			got = append(got, v)
		}
	}
	var want []string
	for i := range shards {
		want = append(want, strings.ReplaceAll(out, "$(SHARD_INDEX)", fmt.Sprint(i)))
	}
	if strings.Join(got, " ") != strings.Join(want, " ") {
		t.Errorf("merge --shard %v, want the %d shard outputs %v", got, shards, want)
	}
	if mo := argValue(mc.Args, "--out="); mo == "" || strings.HasPrefix(out, mo) {
		t.Errorf("merge --out=%q must be a directory of its own", mo)
	}
	if vol := merge.Spec.Template.Spec.Volumes; len(vol) == 0 || !sameClaim(vol, spec.Template.Spec.Volumes, "results") {
		t.Error("the merge must mount the results claim the shards write to")
	}
}

// sameClaim reports whether volume name claims the same
// PersistentVolumeClaim in a and b.
func sameClaim(a, b []corev1.Volume, name string) bool {
	claim := func(vs []corev1.Volume) string {
		for _, v := range vs {
			if v.Name == name && v.PersistentVolumeClaim != nil {
				return v.PersistentVolumeClaim.ClaimName
			}
		}
		return ""
	}
	return claim(a) != "" && claim(a) == claim(b)
}
