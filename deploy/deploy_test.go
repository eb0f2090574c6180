package deploy

import (
	"bufio"
	"bytes"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"net"
	"os"
	"os/exec"
	"path"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"
	"testing"

	"go.yaml.in/yaml/v3"

	"tautline/server"
	"tautline/sim"
)

var update = flag.Bool("update", false, "regenerate kubernetes/cell-files.yaml from testdata/demo")

// ---- Kubernetes objects: only the fields these tests read. ----

type object struct {
	APIVersion string `yaml:"apiVersion"`
	Kind       string `yaml:"kind"`
	Metadata   struct {
		Name         string            `yaml:"name"`
		GenerateName string            `yaml:"generateName"`
		Labels       map[string]string `yaml:"labels"`
	} `yaml:"metadata"`
	Data       map[string]string `yaml:"data"`
	StringData map[string]string `yaml:"stringData"`
	Spec       spec              `yaml:"spec"`
}

type spec struct {
	// Deployment and Job.
	Replicas *int `yaml:"replicas"`
	Strategy struct {
		Type string `yaml:"type"`
	} `yaml:"strategy"`
	Selector struct {
		MatchLabels map[string]string `yaml:"matchLabels"`
	} `yaml:"selector"`
	CompletionMode string `yaml:"completionMode"`
	Completions    int    `yaml:"completions"`
	Template       struct {
		Metadata struct {
			Labels map[string]string `yaml:"labels"`
		} `yaml:"metadata"`
		Spec podSpec `yaml:"spec"`
	} `yaml:"template"`
	// Service.
	ServiceSelector map[string]string `yaml:"-"`
	Ports           []servicePort     `yaml:"ports"`
}

type servicePort struct {
	Name       string `yaml:"name"`
	Port       int    `yaml:"port"`
	TargetPort string `yaml:"targetPort"`
}

type podSpec struct {
	TerminationGracePeriodSeconds float64 `yaml:"terminationGracePeriodSeconds"`
	RestartPolicy                 string  `yaml:"restartPolicy"`
	SecurityContext               struct {
		RunAsNonRoot bool `yaml:"runAsNonRoot"`
		RunAsUser    int  `yaml:"runAsUser"`
	} `yaml:"securityContext"`
	Containers []container `yaml:"containers"`
	Volumes    []volume    `yaml:"volumes"`
}

type container struct {
	Name    string   `yaml:"name"`
	Image   string   `yaml:"image"`
	Command []string `yaml:"command"`
	Args    []string `yaml:"args"`
	Env     []struct {
		Name      string `yaml:"name"`
		Value     string `yaml:"value"`
		ValueFrom *struct {
			FieldRef *struct {
				FieldPath string `yaml:"fieldPath"`
			} `yaml:"fieldRef"`
		} `yaml:"valueFrom"`
	} `yaml:"env"`
	Ports []struct {
		Name          string `yaml:"name"`
		ContainerPort int    `yaml:"containerPort"`
	} `yaml:"ports"`
	StartupProbe   *probe `yaml:"startupProbe"`
	LivenessProbe  *probe `yaml:"livenessProbe"`
	ReadinessProbe *probe `yaml:"readinessProbe"`
	Resources      struct {
		Requests map[string]string `yaml:"requests"`
		Limits   map[string]string `yaml:"limits"`
	} `yaml:"resources"`
	SecurityContext struct {
		AllowPrivilegeEscalation *bool `yaml:"allowPrivilegeEscalation"`
		ReadOnlyRootFilesystem   bool  `yaml:"readOnlyRootFilesystem"`
	} `yaml:"securityContext"`
	VolumeMounts []struct {
		Name      string `yaml:"name"`
		MountPath string `yaml:"mountPath"`
		ReadOnly  bool   `yaml:"readOnly"`
	} `yaml:"volumeMounts"`
}

type probe struct {
	GRPC *struct {
		Port    int     `yaml:"port"`
		Service *string `yaml:"service"`
	} `yaml:"grpc"`
}

type volume struct {
	Name      string `yaml:"name"`
	ConfigMap *struct {
		Name string `yaml:"name"`
	} `yaml:"configMap"`
	Secret *struct {
		SecretName string `yaml:"secretName"`
	} `yaml:"secret"`
	PersistentVolumeClaim *struct {
		ClaimName string `yaml:"claimName"`
	} `yaml:"persistentVolumeClaim"`
	EmptyDir *struct{} `yaml:"emptyDir"`
}

// readObjects parses every YAML document in file.
func readObjects(t *testing.T, file string) []object {
	t.Helper()
	data, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	var objs []object
	for {
		var o object
		err := dec.Decode(&o)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatalf("%s: %v", file, err)
		}
		if o.APIVersion == "" || o.Kind == "" {
			t.Fatalf("%s: a document without apiVersion and kind", file)
		}
		objs = append(objs, o)
	}
	// The Service's selector sits where a Deployment's is a struct.
	var raw struct {
		Spec struct {
			Selector map[string]any `yaml:"selector"`
		} `yaml:"spec"`
	}
	if len(objs) == 1 && objs[0].Kind == "Service" {
		if err := yaml.Unmarshal(data, &raw); err != nil {
			t.Fatal(err)
		}
		objs[0].Spec.ServiceSelector = map[string]string{}
		for k, v := range raw.Spec.Selector {
			objs[0].Spec.ServiceSelector[k] = fmt.Sprint(v)
		}
	}
	return objs
}

// manifests reads every file of kubernetes/ and indexes the objects by
// kind and name.
func manifests(t *testing.T) map[string]object {
	t.Helper()
	files, err := filepath.Glob("kubernetes/*.yaml")
	if err != nil || len(files) == 0 {
		t.Fatalf("no manifests: %v", err)
	}
	m := map[string]object{}
	for _, f := range files {
		if filepath.Base(f) == "kustomization.yaml" {
			continue
		}
		for _, o := range readObjects(t, f) {
			name := o.Metadata.Name
			if name == "" {
				name = o.Metadata.GenerateName
			}
			m[o.Kind+"/"+name] = o
		}
	}
	return m
}

func get(t *testing.T, m map[string]object, key string) object {
	t.Helper()
	o, ok := m[key]
	if !ok {
		keys := make([]string, 0, len(m))
		for k := range m {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		t.Fatalf("no %s among %v", key, keys)
	}
	return o
}

// ---- The real binaries. ----

var (
	buildOnce sync.Once
	binDir    string
	buildErr  error
)

// binaries builds tautlined and tautline once for the package's tests.
func binaries(t *testing.T) (tautlined, tautline string) {
	t.Helper()
	buildOnce.Do(func() {
		binDir, buildErr = os.MkdirTemp("", "tautline-deploy-test-")
		if buildErr != nil {
			return
		}
		goTool, err := exec.LookPath("go")
		if err != nil {
			buildErr = fmt.Errorf("the go command is not on PATH: %v", err)
			return
		}
		cmd := exec.Command(goTool, "build", "-o", binDir+string(filepath.Separator), "../server/cmd/tautlined", "../client/cmd/tautline")
		out, err := cmd.CombinedOutput()
		if err != nil {
			buildErr = fmt.Errorf("go build: %v\n%s", err, out)
		}
	})
	if buildErr != nil {
		t.Fatal(buildErr)
	}
	return filepath.Join(binDir, "tautlined"), filepath.Join(binDir, "tautline")
}

func TestMain(m *testing.M) {
	flag.Parse()
	code := m.Run()
	if binDir != "" {
		os.RemoveAll(binDir)
	}
	os.Exit(code)
}

// acceptsArgs runs bin with args and -help last: the binaries parse every
// flag before -help stops them, so an unknown flag or a bad value fails
// (exit 2) and a good command line exits 0 without doing anything.
func acceptsArgs(t *testing.T, bin string, args []string) {
	t.Helper()
	cmd := exec.Command(bin, append(slices.Clone(args), "-help")...)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Errorf("%s %q: %v\n%s", filepath.Base(bin), args, err, lastLines(out, 5))
	}
}

func lastLines(b []byte, n int) string {
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	return strings.Join(lines[max(0, len(lines)-n):], "\n")
}

// daemonFlags lists the daemon's flag names: the config's options and
// -config.
func daemonFlags() map[string]bool {
	cfg := server.DefaultConfig()
	fs := flag.NewFlagSet("tautlined", flag.ContinueOnError)
	cfg.BindFlags(fs)
	names := map[string]bool{"config": true}
	fs.VisitAll(func(f *flag.Flag) { names[f.Name] = true })
	return names
}

func port(t *testing.T, addr string) int {
	t.Helper()
	_, p, err := net.SplitHostPort(addr)
	if err != nil {
		t.Fatal(err)
	}
	n, err := strconv.Atoi(p)
	if err != nil {
		t.Fatal(err)
	}
	return n
}

func flagValue(args []string, name string) (string, bool) {
	for i, a := range args {
		if (a == "-"+name || a == "--"+name) && i+1 < len(args) {
			return args[i+1], true
		}
		if v, ok := strings.CutPrefix(a, "-"+name+"="); ok {
			return v, true
		}
		if v, ok := strings.CutPrefix(a, "--"+name+"="); ok {
			return v, true
		}
	}
	return "", false
}

// mounted finds the volume mounted at the directory of file and returns
// it and the file's name inside it.
func mounted(t *testing.T, c container, vols []volume, file string) (volume, string) {
	t.Helper()
	dir, base := path.Split(file)
	dir = strings.TrimSuffix(dir, "/")
	for _, vm := range c.VolumeMounts {
		if vm.MountPath == dir {
			for _, v := range vols {
				if v.Name == vm.Name {
					return v, base
				}
			}
			t.Fatalf("volume mount %s names no volume %q", vm.MountPath, vm.Name)
		}
	}
	t.Fatalf("%s: no volume is mounted at %s", file, dir)
	return volume{}, ""
}

func containerPort(t *testing.T, c container, name string) int {
	t.Helper()
	for _, p := range c.Ports {
		if p.Name == name {
			return p.ContainerPort
		}
	}
	t.Fatalf("container %s has no port named %q", c.Name, name)
	return 0
}

// ---- Tests. ----

// The daemon's Deployment, its config and the objects it mounts agree
// with each other and with what the daemon serves.
func TestKubernetesDaemonMatchesTheDaemon(t *testing.T) {
	tautlined, _ := binaries(t)
	m := manifests(t)
	dep := get(t, m, "Deployment/tautlined-cell-a")
	if dep.Spec.Replicas == nil || *dep.Spec.Replicas != 1 {
		t.Errorf("replicas %v, want 1: one daemon per cell", dep.Spec.Replicas)
	}
	if dep.Spec.Strategy.Type != "Recreate" {
		t.Errorf("strategy %q, want Recreate: two daemons must never command one cell", dep.Spec.Strategy.Type)
	}
	for k, v := range dep.Spec.Selector.MatchLabels {
		if dep.Spec.Template.Metadata.Labels[k] != v {
			t.Errorf("selector %s=%s does not match the pod's labels", k, v)
		}
	}
	pod := dep.Spec.Template.Spec
	if len(pod.Containers) != 1 {
		t.Fatalf("%d containers, want 1", len(pod.Containers))
	}
	c := pod.Containers[0]
	acceptsArgs(t, tautlined, c.Args)

	// The config file the daemon is told to read, through its own parser.
	configPath, ok := flagValue(c.Args, "config")
	if !ok {
		t.Fatal("the daemon is not given -config")
	}
	vol, key := mounted(t, c, pod.Volumes, configPath)
	if vol.ConfigMap == nil {
		t.Fatalf("%s is not from a ConfigMap", configPath)
	}
	cm := get(t, m, "ConfigMap/"+vol.ConfigMap.Name)
	data, ok := cm.Data[key]
	if !ok {
		t.Fatalf("ConfigMap %s has no %s", cm.Metadata.Name, key)
	}
	cfg := server.DefaultConfig()
	if err := cfg.ParseConfig("kubernetes/config.yaml:"+key, []byte(data)); err != nil {
		t.Fatal(err)
	}
	for _, e := range c.Env {
		if e.ValueFrom == nil {
			if err := cfg.ApplyEnv(func(k string) string {
				if k == e.Name {
					return e.Value
				}
				return ""
			}); err != nil {
				t.Error(err)
			}
		}
	}
	if err := cfg.Validate(); err != nil {
		t.Errorf("the Deployment's config does not validate: %v", err)
	}

	// Ports: what the daemon listens on is what the pod declares, and
	// every listener is reachable from outside the pod.
	for _, l := range []struct{ addr, port string }{
		{cfg.Listen, "grpc"},
		{cfg.MetricsListen, "metrics"},
		{cfg.ProbeListen, "probe"},
	} {
		if l.addr == "" {
			t.Errorf("the %s listener is off", l.port)
			continue
		}
		if server.ListenIsLoopback(l.addr) {
			t.Errorf("%s listens on loopback (%s): the kubelet and the Service cannot reach it", l.port, l.addr)
		}
		if got, want := containerPort(t, c, l.port), port(t, l.addr); got != want {
			t.Errorf("container port %s is %d, the daemon listens on %d", l.port, got, want)
		}
	}

	// Native gRPC probes: plaintext, so on the probe port; readiness asks
	// for the CellControl service, which the daemon reports by name.
	probePort := port(t, cfg.ProbeListen)
	for name, p := range map[string]*probe{"startup": c.StartupProbe, "liveness": c.LivenessProbe, "readiness": c.ReadinessProbe} {
		if p == nil || p.GRPC == nil {
			t.Errorf("no native gRPC %s probe", name)
			continue
		}
		if p.GRPC.Port != probePort {
			t.Errorf("%s probe on port %d, the daemon serves health in plaintext on %d", name, p.GRPC.Port, probePort)
		}
		if s := p.GRPC.Service; s != nil && *s != "" && *s != server.ServiceName {
			t.Errorf("%s probe asks for service %q; the daemon reports \"\" and %q", name, *s, server.ServiceName)
		}
	}
	if s := c.ReadinessProbe.GRPC.Service; s == nil || *s != server.ServiceName {
		t.Errorf("readiness probe service %v, want %q", s, server.ServiceName)
	}

	// Every cell file is in the mounted cell ConfigMap and loads.
	for _, cellPath := range cfg.Cells {
		vol, key := mounted(t, c, pod.Volumes, cellPath)
		if vol.ConfigMap == nil {
			t.Fatalf("%s is not from a ConfigMap", cellPath)
		}
		files := get(t, m, "ConfigMap/"+vol.ConfigMap.Name).Data
		if _, ok := files[key]; !ok {
			t.Fatalf("ConfigMap %s has no %s", vol.ConfigMap.Name, key)
		}
		dir := path.Dir(cellPath)
		read := func(name string) ([]byte, error) {
			rel, err := filepath.Rel(dir, name)
			if err != nil || strings.Contains(rel, "/") {
				return nil, fmt.Errorf("%s is outside the ConfigMap %s mounted at %s", name, vol.ConfigMap.Name, dir)
			}
			d, ok := files[rel]
			if !ok {
				return nil, fmt.Errorf("%s: %w (ConfigMap %s has no key %s)", name, fs.ErrNotExist, vol.ConfigMap.Name, rel)
			}
			return []byte(d), nil
		}
		if _, err := sim.LoadCell(cellPath, read); err != nil {
			t.Errorf("the cell from the ConfigMap: %v", err)
		}
	}

	// TLS files come from the Secret.
	for _, f := range []string{cfg.TLSCertFile, cfg.TLSKeyFile, cfg.TLSClientCAFile} {
		vol, key := mounted(t, c, pod.Volumes, f)
		if vol.Secret == nil {
			t.Errorf("%s is not from a Secret", f)
			continue
		}
		sec := get(t, m, "Secret/"+vol.Secret.SecretName)
		if _, ok := sec.StringData[key]; !ok {
			if _, ok := sec.Data[key]; !ok {
				t.Errorf("Secret %s has no %s", sec.Metadata.Name, key)
			}
		}
	}

	// Captures go to the claimed volume.
	vol, _ = mounted(t, c, pod.Volumes, cfg.CaptureDir+"/x.tlcap")
	if vol.PersistentVolumeClaim == nil {
		t.Errorf("the capture directory %s is not a persistent volume", cfg.CaptureDir)
	} else {
		get(t, m, "PersistentVolumeClaim/"+vol.PersistentVolumeClaim.ClaimName)
	}

	if pod.TerminationGracePeriodSeconds <= cfg.ShutdownGraceS {
		t.Errorf("terminationGracePeriodSeconds %v ≤ shutdown_grace_s %v: the kubelet would kill a graceful stop", pod.TerminationGracePeriodSeconds, cfg.ShutdownGraceS)
	}
	for _, r := range []string{"cpu", "memory"} {
		if c.Resources.Requests[r] == "" {
			t.Errorf("no %s request", r)
		}
	}
	if !pod.SecurityContext.RunAsNonRoot || pod.SecurityContext.RunAsUser == 0 {
		t.Error("the pod may run as root")
	}
	if !c.SecurityContext.ReadOnlyRootFilesystem || c.SecurityContext.AllowPrivilegeEscalation == nil || *c.SecurityContext.AllowPrivilegeEscalation {
		t.Error("the container's root filesystem is writable or it may escalate privileges")
	}

	// The Service selects the pod and forwards to ports it has.
	svc := get(t, m, "Service/tautlined-cell-a")
	if len(svc.Spec.ServiceSelector) == 0 {
		t.Error("the Service selects nothing")
	}
	for k, v := range svc.Spec.ServiceSelector {
		if dep.Spec.Template.Metadata.Labels[k] != v {
			t.Errorf("Service selector %s=%s does not match the pod", k, v)
		}
	}
	for _, p := range svc.Spec.Ports {
		if got := containerPort(t, c, p.TargetPort); got != p.Port {
			t.Errorf("Service port %s is %d, forwarding to container port %d; keep them equal so clients and the daemon's certificate agree", p.Name, p.Port, got)
		}
		if p.TargetPort == "probe" {
			t.Error("the Service exposes the plaintext probe port")
		}
	}
}

// The cell ConfigMap holds the demo cell's files as they are in testdata.
func TestKubernetesCellFilesAreTheDemoCell(t *testing.T) {
	want := cellFilesYAML(t)
	if *update {
		if err := os.WriteFile("kubernetes/cell-files.yaml", want, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	got, err := os.ReadFile("kubernetes/cell-files.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Error("kubernetes/cell-files.yaml differs from testdata/demo; run go test ./deploy -run CellFiles -update")
	}
}

// cellFilesYAML is the ConfigMap of testdata/demo's cell, figure, arm and
// cue files.
func cellFilesYAML(t *testing.T) []byte {
	t.Helper()
	names := []string{"cell.json", "arm6.urdf", "jellyfish.figure.json", "cue.csv"}
	var b bytes.Buffer
	b.WriteString(`# The cell files of cell-a, mounted at /etc/tautline/cell. This example is
# the invented demo cell of testdata/demo (generated from it by
# go test ./deploy -run CellFiles -update). The cue is loaded into the
# daemon by the controller or an operator (LoadCue), not read by it.
apiVersion: v1
kind: ConfigMap
metadata:
  name: tautline-cell-a-cell
  labels:
    app.kubernetes.io/name: tautlined
    app.kubernetes.io/instance: cell-a
data:
`)
	for _, n := range names {
		d, err := os.ReadFile(filepath.Join("..", "testdata", "demo", n))
		if err != nil {
			t.Fatal(err)
		}
		if bytes.ContainsAny(d, "\t\r") || !bytes.HasSuffix(d, []byte("\n")) {
			t.Fatalf("testdata/demo/%s: tabs, carriage returns or no final newline do not survive a YAML literal block", n)
		}
		fmt.Fprintf(&b, "  %s: |\n", n)
		sc := bufio.NewScanner(bytes.NewReader(d))
		sc.Buffer(make([]byte, 1<<20), 1<<20)
		for sc.Scan() {
			if sc.Text() == "" {
				b.WriteString("\n")
			} else {
				fmt.Fprintf(&b, "    %s\n", sc.Text())
			}
		}
	}
	// The YAML must give back the files byte for byte.
	var cm object
	if err := yaml.Unmarshal(b.Bytes(), &cm); err != nil {
		t.Fatal(err)
	}
	for _, n := range names {
		d, _ := os.ReadFile(filepath.Join("..", "testdata", "demo", n))
		if cm.Data[n] != string(d) {
			t.Fatalf("%s does not survive the YAML round trip", n)
		}
	}
	return b.Bytes()
}

// The kustomization names every daemon manifest, and each exists.
func TestKustomizationListsTheManifests(t *testing.T) {
	data, err := os.ReadFile("kubernetes/kustomization.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var k struct {
		Resources []string `yaml:"resources"`
	}
	if err := yaml.Unmarshal(data, &k); err != nil {
		t.Fatal(err)
	}
	files, _ := filepath.Glob("kubernetes/*.yaml")
	var want []string
	for _, f := range files {
		switch b := filepath.Base(f); b {
		case "kustomization.yaml", "replay-job.yaml": // the Job is created per sweep
		default:
			want = append(want, b)
		}
	}
	got := slices.Clone(k.Resources)
	sort.Strings(got)
	sort.Strings(want)
	if !slices.Equal(got, want) {
		t.Errorf("kustomization resources %v, want %v", got, want)
	}
}

// The replay Job runs the real tautline replay with flags it has, one
// capture per index.
func TestKubernetesReplayJob(t *testing.T) {
	_, tautline := binaries(t)
	job := get(t, manifests(t), "Job/tautline-replay-sweep-")
	if job.Spec.CompletionMode != "Indexed" || job.Spec.Completions < 1 {
		t.Errorf("completion mode %q, %d completions; want an indexed Job", job.Spec.CompletionMode, job.Spec.Completions)
	}
	pod := job.Spec.Template.Spec
	if pod.RestartPolicy != "Never" && pod.RestartPolicy != "OnFailure" {
		t.Errorf("restartPolicy %q is not allowed in a Job", pod.RestartPolicy)
	}
	if len(pod.Containers) != 1 {
		t.Fatalf("%d containers", len(pod.Containers))
	}
	c := pod.Containers[0]
	if len(c.Command) != 1 || c.Command[0] != "/usr/local/bin/tautline" {
		t.Errorf("command %q, want the image's /usr/local/bin/tautline", c.Command)
	}
	if len(c.Args) == 0 || c.Args[0] != "replay" || !slices.Contains(c.Args, "-fast") {
		t.Fatalf("args %q, want tautline replay -fast ...", c.Args)
	}
	acceptsArgs(t, tautline, c.Args)
	// The capture path uses the index, which Kubernetes expands from a
	// variable the container declares.
	capture := c.Args[len(c.Args)-1]
	if !strings.Contains(capture, "$(JOB_COMPLETION_INDEX)") {
		t.Errorf("capture %q does not depend on the completion index", capture)
	}
	declared := false
	for _, e := range c.Env {
		if e.Name == "JOB_COMPLETION_INDEX" && e.ValueFrom != nil && e.ValueFrom.FieldRef != nil &&
			e.ValueFrom.FieldRef.FieldPath == "metadata.annotations['batch.kubernetes.io/job-completion-index']" {
			declared = true
		}
	}
	if !declared {
		t.Error("JOB_COMPLETION_INDEX is not declared from the completion-index annotation")
	}
	if vol, _ := mounted(t, c, pod.Volumes, path.Dir(capture)); vol.PersistentVolumeClaim == nil {
		t.Errorf("captures at %s are not on a persistent volume", path.Dir(capture))
	}
	// The root file system is read-only: the in-process daemon's files go
	// to a scratch volume at /tmp.
	if vol, _ := mounted(t, c, pod.Volumes, "/tmp/x"); vol.EmptyDir == nil {
		t.Error("/tmp is not a scratch (emptyDir) volume")
	}
}

// ---- Container build file. ----

type containerfile struct {
	froms      []string
	lines      []string // instructions, continuation lines joined
	user       string
	volumes    []string
	expose     []int
	entrypoint []string
	cmd        []string
}

func readContainerfile(t *testing.T) containerfile {
	t.Helper()
	data, err := os.ReadFile("container/Containerfile")
	if err != nil {
		t.Fatal(err)
	}
	var cf containerfile
	var cur string
	for _, l := range strings.Split(string(data), "\n") {
		if strings.HasPrefix(strings.TrimSpace(l), "#") {
			continue
		}
		cur += strings.TrimSpace(l)
		if strings.HasSuffix(cur, "\\") {
			cur = strings.TrimSuffix(cur, "\\") + " "
			continue
		}
		if cur != "" {
			cf.lines = append(cf.lines, cur)
		}
		cur = ""
	}
	for _, l := range cf.lines {
		instr, rest, _ := strings.Cut(l, " ")
		switch strings.ToUpper(instr) {
		case "FROM":
			cf.froms = append(cf.froms, rest)
		case "USER":
			cf.user = rest
		case "VOLUME":
			cf.volumes = append(cf.volumes, jsonArray(t, rest)...)
		case "EXPOSE":
			for _, p := range strings.Fields(rest) {
				n, err := strconv.Atoi(p)
				if err != nil {
					t.Fatalf("EXPOSE %s: %v", p, err)
				}
				cf.expose = append(cf.expose, n)
			}
		case "ENTRYPOINT":
			cf.entrypoint = jsonArray(t, rest)
		case "CMD":
			cf.cmd = jsonArray(t, rest)
		}
	}
	return cf
}

// jsonArray parses an exec-form list (["a", "b"]); JSON is YAML.
func jsonArray(t *testing.T, s string) []string {
	t.Helper()
	var v []string
	if err := yaml.Unmarshal([]byte(s), &v); err != nil || !strings.HasPrefix(s, "[") {
		t.Fatalf("%q is not an exec-form list: %v", s, err)
	}
	return v
}

func TestContainerfile(t *testing.T) {
	cf := readContainerfile(t)
	if len(cf.froms) < 2 {
		t.Errorf("%d stages, want a multi-stage build", len(cf.froms))
	}
	// The build stage's Go is at least the module's.
	goMod, err := os.ReadFile("../go.mod")
	if err != nil {
		t.Fatal(err)
	}
	modGo := regexp.MustCompile(`(?m)^go (\d+)\.(\d+)`).FindSubmatch(goMod)
	imgGo := regexp.MustCompile(`^golang:(\d+)\.(\d+)`).FindStringSubmatch(cf.froms[0])
	if modGo == nil || imgGo == nil {
		t.Fatalf("go.mod go line %q, build image %q", modGo, cf.froms[0])
	}
	if atoi(imgGo[1])*1000+atoi(imgGo[2]) < atoi(string(modGo[1]))*1000+atoi(string(modGo[2])) {
		t.Errorf("build image %s is older than go.mod's go %s.%s", cf.froms[0], modGo[1], modGo[2])
	}
	all := strings.Join(cf.lines, "\n")
	if !strings.Contains(all, "CGO_ENABLED=0") {
		t.Error("the binaries are not built with CGO_ENABLED=0 (static)")
	}
	for _, pkg := range []string{"./server/cmd/tautlined", "./client/cmd/tautline"} {
		if !strings.Contains(all, pkg) {
			t.Errorf("%s is not built", pkg)
		}
		if _, err := os.Stat(filepath.Join("..", pkg)); err != nil {
			t.Errorf("the build names %s: %v", pkg, err)
		}
	}
	uid, _, _ := strings.Cut(cf.user, ":")
	if n, err := strconv.Atoi(uid); cf.user == "" || uid == "root" || (err == nil && n == 0) {
		t.Errorf("USER %q: want a non-root user", cf.user)
	}

	// The image agrees with the Deployment: user, capture volume, ports,
	// entry point and default config path.
	m := manifests(t)
	dep := get(t, m, "Deployment/tautlined-cell-a")
	pod := dep.Spec.Template.Spec
	c := pod.Containers[0]
	if strconv.Itoa(pod.SecurityContext.RunAsUser) != uid {
		t.Errorf("the Deployment runs as %d, the image as %s", pod.SecurityContext.RunAsUser, uid)
	}
	cfg := server.DefaultConfig()
	configPath, _ := flagValue(c.Args, "config")
	vol, key := mounted(t, c, pod.Volumes, configPath)
	if err := cfg.ParseConfig(key, []byte(get(t, m, "ConfigMap/"+vol.ConfigMap.Name).Data[key])); err != nil {
		t.Fatal(err)
	}
	if !slices.Contains(cf.volumes, cfg.CaptureDir) {
		t.Errorf("VOLUME %q does not hold the capture directory %s", cf.volumes, cfg.CaptureDir)
	}
	var ports []int
	for _, p := range c.Ports {
		ports = append(ports, p.ContainerPort)
	}
	sort.Ints(ports)
	expose := slices.Clone(cf.expose)
	sort.Ints(expose)
	if !slices.Equal(ports, expose) {
		t.Errorf("EXPOSE %v, the Deployment's ports %v", expose, ports)
	}
	if server.DefaultListen != "127.0.0.1:"+strconv.Itoa(expose[0]) {
		t.Errorf("the gRPC port %d is not the daemon's default (%s)", expose[0], server.DefaultListen)
	}
	if len(cf.entrypoint) != 1 || cf.entrypoint[0] != "/usr/local/bin/tautlined" {
		t.Errorf("ENTRYPOINT %q, want /usr/local/bin/tautlined", cf.entrypoint)
	}
	if v, ok := flagValue(cf.cmd, "config"); !ok || v != configPath {
		t.Errorf("CMD %q does not read the config the Deployment mounts (%s)", cf.cmd, configPath)
	}
	tautlined, _ := binaries(t)
	acceptsArgs(t, tautlined, cf.cmd)
}

func atoi(s string) int {
	n, _ := strconv.Atoi(s)
	return n
}

// ---- systemd. ----

// readUnit parses a systemd unit file: [Section] headers, Key=Value lines
// (a key may repeat), comments with # or ;, and backslash continuations.
func readUnit(t *testing.T, file string) map[string]map[string][]string {
	t.Helper()
	data, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	u := map[string]map[string][]string{}
	section := ""
	var cont string
	for i, l := range strings.Split(string(data), "\n") {
		l = strings.TrimSpace(l)
		if cont != "" {
			l = cont + " " + l
			cont = ""
		}
		if l == "" || l[0] == '#' || l[0] == ';' {
			continue
		}
		if strings.HasSuffix(l, "\\") {
			cont = strings.TrimSuffix(l, "\\")
			continue
		}
		if l[0] == '[' && l[len(l)-1] == ']' {
			section = l[1 : len(l)-1]
			u[section] = map[string][]string{}
			continue
		}
		k, v, ok := strings.Cut(l, "=")
		if !ok || section == "" {
			t.Fatalf("%s:%d: %q is neither a [Section] nor Key=Value in a section", file, i+1, l)
		}
		u[section][strings.TrimSpace(k)] = append(u[section][strings.TrimSpace(k)], strings.TrimSpace(v))
	}
	return u
}

// readEnvFile parses KEY=VALUE lines (systemd's EnvironmentFile form
// without quoting, which this file does not use).
func readEnvFile(t *testing.T, file string) map[string]string {
	t.Helper()
	data, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	env := map[string]string{}
	for i, l := range strings.Split(string(data), "\n") {
		l = strings.TrimSpace(l)
		if l == "" || l[0] == '#' {
			continue
		}
		k, v, ok := strings.Cut(l, "=")
		if !ok || strings.ContainsAny(v, `"'\`) {
			t.Fatalf("%s:%d: %q: want KEY=VALUE without quotes", file, i+1, l)
		}
		if _, dup := env[k]; dup {
			t.Fatalf("%s:%d: %s set twice", file, i+1, k)
		}
		env[k] = v
	}
	return env
}

func TestSystemdUnitAndEnvironment(t *testing.T) {
	tautlined, _ := binaries(t)
	u := readUnit(t, "systemd/tautlined.service")
	svc := u["Service"]
	if svc == nil || u["Unit"] == nil || u["Install"] == nil {
		t.Fatalf("sections %v, want Unit, Service and Install", u)
	}
	one := func(key string) string {
		t.Helper()
		if len(svc[key]) != 1 {
			t.Errorf("%s is set %d times, want once", key, len(svc[key]))
			return ""
		}
		return svc[key][0]
	}
	exec := strings.Fields(one("ExecStart"))
	if len(exec) == 0 || exec[0] != "/usr/local/bin/tautlined" {
		t.Fatalf("ExecStart %q", exec)
	}
	acceptsArgs(t, tautlined, exec[1:])
	for k, want := range map[string]string{
		"Restart":         "on-failure",
		"NoNewPrivileges": "yes",
		"ProtectSystem":   "strict",
		"ProtectHome":     "yes",
		"PrivateTmp":      "yes",
	} {
		if got := one(k); got != want {
			t.Errorf("%s=%s, want %s", k, got, want)
		}
	}
	if user := one("User"); user == "" || user == "root" || user == "0" {
		if one("DynamicUser") != "yes" {
			t.Errorf("User=%q and no DynamicUser: the daemon would run as root", user)
		}
	}
	if cb, ok := svc["CapabilityBoundingSet"]; !ok || strings.TrimSpace(cb[len(cb)-1]) != "" {
		t.Errorf("CapabilityBoundingSet %q, want empty (no capabilities)", cb)
	}

	envFile := one("EnvironmentFile")
	if filepath.Base(envFile) != "tautlined.env" {
		t.Fatalf("EnvironmentFile %s is not the shipped tautlined.env", envFile)
	}
	env := readEnvFile(t, "systemd/tautlined.env")
	flags := daemonFlags()
	for k := range env {
		name := strings.ReplaceAll(strings.ToLower(strings.TrimPrefix(k, "TAUTLINED_")), "_", "-")
		if !strings.HasPrefix(k, "TAUTLINED_") || !flags[name] || server.EnvName(name) != k {
			t.Errorf("%s in the environment file is not a tautlined variable", k)
		}
	}
	cfg := server.DefaultConfig()
	if err := cfg.ApplyEnv(func(k string) string { return env[k] }); err != nil {
		t.Fatal(err)
	}
	if err := cfg.Validate(); err != nil {
		t.Errorf("the environment file's config does not validate: %v", err)
	}
	if cfg.MetricsListen == "" || !server.ListenIsLoopback(cfg.MetricsListen) {
		t.Errorf("metrics on %q; the example keeps them on loopback", cfg.MetricsListen)
	}

	// The capture directory is the one writable path.
	rw := strings.Fields(strings.Join(svc["ReadWritePaths"], " "))
	if !slices.Contains(rw, cfg.CaptureDir) {
		t.Errorf("ReadWritePaths %q lacks the capture directory %s", rw, cfg.CaptureDir)
	}
	for _, p := range rw {
		if p != cfg.CaptureDir {
			t.Errorf("ReadWritePaths also opens %s", p)
		}
	}
	stop := one("TimeoutStopSec")
	s, err := strconv.ParseFloat(strings.TrimSuffix(stop, "s"), 64)
	if err != nil {
		t.Fatalf("TimeoutStopSec=%s: want seconds", stop)
	}
	if s <= cfg.ShutdownGraceS {
		t.Errorf("TimeoutStopSec=%s ≤ shutdown-grace-s %v: systemd would kill a graceful stop", stop, cfg.ShutdownGraceS)
	}
}
