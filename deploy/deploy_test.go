// Package deploy_test checks the deployment files under deploy/ against what the
// server expects: the Kubernetes manifests' kinds and fields, the systemd unit's
// hardening, the container build's stages, and that every BEAMLEDGER_* variable
// they set is one the server reads. They cannot be applied here (no cluster, no
// systemd as PID 1, no container runtime), so their structure is what is tested.
package deploy_test

import (
	"bufio"
	"bytes"
	"errors"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"

	"gopkg.in/yaml.v3"
)

// manifest is the part of a Kubernetes object these checks read.
type manifest struct {
	APIVersion string `yaml:"apiVersion"`
	Kind       string `yaml:"kind"`
	Metadata   struct {
		Name string `yaml:"name"`
	} `yaml:"metadata"`
	Data map[string]string `yaml:"data"`
	Spec struct {
		Replicas     *int `yaml:"replicas"`
		MinAvailable any  `yaml:"minAvailable"`
		Selector     struct {
			MatchLabels map[string]string `yaml:"matchLabels"`
		} `yaml:"selector"`
		Template podTemplate `yaml:"template"`
		Ports    []struct {
			TargetPort string `yaml:"targetPort"`
		} `yaml:"ports"`
	} `yaml:"spec"`
	// Resources lists a Kustomization's files.
	Resources []string `yaml:"resources"`
}

type podTemplate struct {
	Metadata struct {
		Labels map[string]string `yaml:"labels"`
	} `yaml:"metadata"`
	Spec struct {
		RestartPolicy   string          `yaml:"restartPolicy"`
		SecurityContext securityContext `yaml:"securityContext"`
		Containers      []container     `yaml:"containers"`
		Volumes         []struct {
			Name   string `yaml:"name"`
			Secret *struct {
				SecretName string `yaml:"secretName"`
			} `yaml:"secret"`
		} `yaml:"volumes"`
	} `yaml:"spec"`
}

type securityContext struct {
	RunAsNonRoot             *bool `yaml:"runAsNonRoot"`
	RunAsUser                *int  `yaml:"runAsUser"`
	ReadOnlyRootFilesystem   *bool `yaml:"readOnlyRootFilesystem"`
	AllowPrivilegeEscalation *bool `yaml:"allowPrivilegeEscalation"`
	Capabilities             struct {
		Drop []string `yaml:"drop"`
	} `yaml:"capabilities"`
}

type probe struct {
	HTTPGet struct {
		Path string `yaml:"path"`
		Port string `yaml:"port"`
	} `yaml:"httpGet"`
}

type container struct {
	Name    string   `yaml:"name"`
	Image   string   `yaml:"image"`
	Command []string `yaml:"command"`
	Args    []string `yaml:"args"`
	Ports   []struct {
		Name          string `yaml:"name"`
		ContainerPort int    `yaml:"containerPort"`
	} `yaml:"ports"`
	Env []struct {
		Name  string `yaml:"name"`
		Value string `yaml:"value"`
	} `yaml:"env"`
	EnvFrom []struct {
		ConfigMapRef *struct {
			Name string `yaml:"name"`
		} `yaml:"configMapRef"`
	} `yaml:"envFrom"`
	LivenessProbe  *probe `yaml:"livenessProbe"`
	ReadinessProbe *probe `yaml:"readinessProbe"`
	VolumeMounts   []struct {
		Name      string `yaml:"name"`
		MountPath string `yaml:"mountPath"`
		ReadOnly  bool   `yaml:"readOnly"`
	} `yaml:"volumeMounts"`
	Resources struct {
		Requests map[string]string `yaml:"requests"`
		Limits   map[string]string `yaml:"limits"`
	} `yaml:"resources"`
	SecurityContext securityContext `yaml:"securityContext"`
}

// readManifests decodes every YAML document under deploy/kubernetes, by kind.
func readManifests(t *testing.T) map[string]manifest {
	t.Helper()
	files, err := filepath.Glob("kubernetes/*.yaml")
	if err != nil || len(files) == 0 {
		t.Fatalf("no manifests: %v", err)
	}
	byKind := map[string]manifest{}
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		// The types above name only the fields checked, so unknown ones are allowed.
		dec := yaml.NewDecoder(bytes.NewReader(b))
		for {
			var m manifest
			err := dec.Decode(&m)
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				t.Fatalf("%s: %v", f, err)
			}
			if _, dup := byKind[m.Kind]; dup {
				t.Errorf("%s: a second %s", f, m.Kind)
			}
			byKind[m.Kind] = m
		}
	}
	return byKind
}

// serverSettings lists the BEAMLEDGER_* variables the server and its commands read,
// from the string literals of cmd/beamledger (flags' and secrets' names).
func serverSettings(t *testing.T) map[string]bool {
	t.Helper()
	files, _ := filepath.Glob("../cmd/beamledger/*.go")
	names := map[string]bool{}
	lit := regexp.MustCompile(`"(BEAMLEDGER_[A-Z0-9_]+)"`)
	for _, f := range files {
		if strings.HasSuffix(f, "_test.go") {
			continue
		}
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		for _, m := range lit.FindAllSubmatch(b, -1) {
			names[string(m[1])] = true
		}
	}
	if !names["BEAMLEDGER_LISTEN"] || !names["BEAMLEDGER_DATABASE_URL"] {
		t.Fatalf("found no settings in cmd/beamledger: %v", names)
	}
	return names
}

// knownSetting reports whether the server reads name, directly or (for a secret)
// as the file named by NAME_FILE.
func knownSetting(known map[string]bool, name string) bool {
	if known[name] {
		return true
	}
	base, ok := strings.CutSuffix(name, "_FILE")
	return ok && known[base]
}

func TestKubernetesManifests(t *testing.T) {
	ms := readManifests(t)
	for _, kind := range []string{"Kustomization", "ConfigMap", "Deployment", "Service", "PodDisruptionBudget", "Job"} {
		if _, ok := ms[kind]; !ok {
			t.Errorf("no %s in deploy/kubernetes", kind)
		}
	}
	files, _ := filepath.Glob("kubernetes/*.yaml")
	for _, f := range files {
		if base := filepath.Base(f); base != "kustomization.yaml" && !slices.Contains(ms["Kustomization"].Resources, base) {
			t.Errorf("the kustomization does not list %s", base)
		}
	}
	known := serverSettings(t)
	for name := range ms["ConfigMap"].Data {
		if !knownSetting(known, name) {
			t.Errorf("ConfigMap sets %s, which the server does not read", name)
		}
	}

	d := ms["Deployment"]
	if d.Spec.Replicas == nil || *d.Spec.Replicas < 2 {
		t.Errorf("Deployment replicas %v, want at least 2", d.Spec.Replicas)
	}
	pod := d.Spec.Template
	for k, v := range d.Spec.Selector.MatchLabels {
		if pod.Metadata.Labels[k] != v {
			t.Errorf("the Deployment's selector %s=%s does not select its pods", k, v)
		}
	}
	checkPod(t, "Deployment", pod, known)
	c := pod.Spec.Containers[0]
	if c.LivenessProbe == nil || c.LivenessProbe.HTTPGet.Path != "/healthz" {
		t.Errorf("liveness probe %+v, want GET /healthz", c.LivenessProbe)
	}
	if c.ReadinessProbe == nil || c.ReadinessProbe.HTTPGet.Path != "/readyz" {
		t.Errorf("readiness probe %+v, want GET /readyz", c.ReadinessProbe)
	}
	ports := map[string]bool{}
	for _, p := range c.Ports {
		ports[p.Name] = true
	}
	for _, p := range []*probe{c.LivenessProbe, c.ReadinessProbe} {
		if p != nil && !ports[p.HTTPGet.Port] {
			t.Errorf("a probe names port %q, which the container does not have", p.HTTPGet.Port)
		}
	}
	if !slices.Contains(c.Args, "serve") {
		t.Errorf("the Deployment runs %v, want serve", c.Args)
	}
	hasConfig := slices.ContainsFunc(c.EnvFrom, func(e struct {
		ConfigMapRef *struct {
			Name string `yaml:"name"`
		} `yaml:"configMapRef"`
	}) bool {
		return e.ConfigMapRef != nil && e.ConfigMapRef.Name == ms["ConfigMap"].Metadata.Name
	})
	if !hasConfig {
		t.Error("the Deployment does not take its environment from the ConfigMap")
	}

	svc := ms["Service"]
	if len(svc.Spec.Ports) == 0 || !ports[svc.Spec.Ports[0].TargetPort] {
		t.Errorf("the Service targets %+v, which the container does not name", svc.Spec.Ports)
	}
	pdb := ms["PodDisruptionBudget"]
	if pdb.Spec.MinAvailable == nil || pdb.Spec.Selector.MatchLabels["app.kubernetes.io/name"] != pod.Metadata.Labels["app.kubernetes.io/name"] {
		t.Errorf("the PodDisruptionBudget %+v does not keep the Deployment's pods", pdb.Spec)
	}
	if n, ok := pdb.Spec.MinAvailable.(int); ok && n >= *d.Spec.Replicas {
		t.Errorf("PodDisruptionBudget minAvailable %d leaves no pod to disrupt of %d", n, *d.Spec.Replicas)
	}

	job := ms["Job"]
	checkPod(t, "Job", job.Spec.Template, known)
	jc := job.Spec.Template.Spec.Containers[0]
	if run := strings.Join(append(jc.Command, jc.Args...), " "); run != "migrate up" {
		t.Errorf("the Job runs %q, want migrate up", run)
	}
	if job.Spec.Template.Spec.RestartPolicy != "Never" && job.Spec.Template.Spec.RestartPolicy != "OnFailure" {
		t.Errorf("the Job's restartPolicy %q", job.Spec.Template.Spec.RestartPolicy)
	}
	if jc.Image != c.Image {
		t.Errorf("the Job runs image %s, the Deployment %s", jc.Image, c.Image)
	}
}

// checkPod checks what every pod of the server must have: a non-root user, a
// read-only root filesystem, no privilege escalation, no capabilities, resource
// requests and limits, known settings and secrets mounted read-only.
func checkPod(t *testing.T, kind string, pod podTemplate, known map[string]bool) {
	t.Helper()
	if len(pod.Spec.Containers) != 1 {
		t.Fatalf("%s has %d containers, want 1", kind, len(pod.Spec.Containers))
	}
	c := pod.Spec.Containers[0]
	psc, csc := pod.Spec.SecurityContext, c.SecurityContext
	if psc.RunAsNonRoot == nil || !*psc.RunAsNonRoot || psc.RunAsUser == nil || *psc.RunAsUser == 0 {
		t.Errorf("%s: pod securityContext %+v, want runAsNonRoot and a non-zero runAsUser", kind, psc)
	}
	if csc.ReadOnlyRootFilesystem == nil || !*csc.ReadOnlyRootFilesystem {
		t.Errorf("%s: readOnlyRootFilesystem not set", kind)
	}
	if csc.AllowPrivilegeEscalation == nil || *csc.AllowPrivilegeEscalation {
		t.Errorf("%s: allowPrivilegeEscalation not false", kind)
	}
	if !slices.Contains(csc.Capabilities.Drop, "ALL") {
		t.Errorf("%s: capabilities %v, want drop ALL", kind, csc.Capabilities.Drop)
	}
	for _, r := range []string{"cpu", "memory"} {
		if c.Resources.Requests[r] == "" || c.Resources.Limits[r] == "" {
			t.Errorf("%s: %s request %q and limit %q, want both", kind, r, c.Resources.Requests[r], c.Resources.Limits[r])
		}
	}
	mounts, readOnly := map[string]string{}, map[string]bool{}
	for _, m := range c.VolumeMounts {
		mounts[m.Name], readOnly[m.Name] = m.MountPath, m.ReadOnly
	}
	secretMount := ""
	for _, v := range pod.Spec.Volumes {
		if v.Secret != nil {
			secretMount = mounts[v.Name]
			if !readOnly[v.Name] {
				t.Errorf("%s mounts the Secret %s writable", kind, v.Secret.SecretName)
			}
		}
	}
	for _, e := range c.Env {
		if !knownSetting(known, e.Name) {
			t.Errorf("%s sets %s, which the server does not read", kind, e.Name)
		}
		if strings.HasSuffix(e.Name, "_FILE") && (secretMount == "" || !strings.HasPrefix(e.Value, secretMount+"/")) {
			t.Errorf("%s: %s=%s is not in the mounted Secret (%q)", kind, e.Name, e.Value, secretMount)
		}
	}
	if !slices.ContainsFunc(c.Env, func(e struct {
		Name  string `yaml:"name"`
		Value string `yaml:"value"`
	}) bool {
		return e.Name == "BEAMLEDGER_DATABASE_URL_FILE"
	}) {
		t.Errorf("%s does not name the database URL's secret file", kind)
	}
}

// unitDirectives reads a systemd unit's directives of one section as name → values.
func unitDirectives(t *testing.T, path, section string) map[string][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	out := map[string][]string{}
	in := ""
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		switch {
		case line == "" || strings.HasPrefix(line, "#") || strings.HasPrefix(line, ";"):
		case strings.HasPrefix(line, "["):
			in = strings.Trim(line, "[]")
		case in == section:
			k, v, ok := strings.Cut(line, "=")
			if !ok {
				t.Errorf("%s: %q is not a directive", path, line)
			}
			out[k] = append(out[k], v)
		}
	}
	return out
}

// sandbox is what every unit under deploy/systemd sets [practice: systemd.exec(5)
// sandboxing options for a network service that writes only its own folders].
var sandbox = map[string]string{
	"NoNewPrivileges": "yes", "ProtectSystem": "strict", "PrivateTmp": "yes", "PrivateDevices": "yes",
	"ProtectHome": "yes", "ProtectKernelTunables": "yes", "ProtectKernelModules": "yes",
	"ProtectControlGroups": "yes", "RestrictSUIDSGID": "yes", "LockPersonality": "yes",
	"MemoryDenyWriteExecute": "yes", "CapabilityBoundingSet": "", "User": "beamledger",
}

func TestSystemdUnit(t *testing.T) {
	svc := unitDirectives(t, "systemd/beamledger.service", "Service")
	for k, want := range map[string]string{"StateDirectory": "beamledger", "ExecStart": "/usr/local/bin/beamledger serve"} {
		if got := svc[k]; len(got) != 1 || got[0] != want {
			t.Errorf("[Service] %s = %q, want %q", k, got, want)
		}
	}
	known := serverSettings(t)
	units, _ := filepath.Glob("systemd/*.service")
	if len(units) < 3 {
		t.Fatalf("units: %v", units)
	}
	for _, u := range units {
		svc := unitDirectives(t, u, "Service")
		for k, want := range sandbox {
			if got := svc[k]; len(got) != 1 || got[0] != want {
				t.Errorf("%s: [Service] %s = %q, want %q", u, k, got, want)
			}
		}
		if fams := strings.Join(svc["RestrictAddressFamilies"], " "); strings.Contains(fams, "AF_PACKET") || !strings.Contains(fams, "AF_INET") {
			t.Errorf("%s: RestrictAddressFamilies = %q", u, fams)
		}
		for _, e := range svc["Environment"] {
			name, _, _ := strings.Cut(e, "=")
			if !knownSetting(known, name) {
				t.Errorf("%s sets %s, which the server does not read", u, name)
			}
		}
		timer := strings.TrimSuffix(u, ".service") + ".timer"
		if svc["Type"] != nil && svc["Type"][0] == "oneshot" {
			tm := unitDirectives(t, timer, "Timer")
			if len(tm["OnCalendar"]) != 1 || len(tm["Persistent"]) != 1 || tm["Persistent"][0] != "true" {
				t.Errorf("%s: want one OnCalendar and Persistent=true, got %v", timer, tm)
			}
		}
	}
	env, err := os.ReadFile("systemd/beamledger.env")
	if err != nil {
		t.Fatal(err)
	}
	for _, line := range strings.Split(string(env), "\n") {
		line = strings.TrimPrefix(strings.TrimSpace(line), "#")
		name, _, ok := strings.Cut(line, "=")
		if ok && strings.HasPrefix(name, "BEAMLEDGER_") && !knownSetting(known, name) {
			t.Errorf("beamledger.env names %s, which the server does not read", name)
		}
		if ok && strings.HasPrefix(name, "BEAMLEDGER_") && slices.Contains([]string{"BEAMLEDGER_DATABASE_URL",
			"BEAMLEDGER_JWT_SIGNING_KEY", "BEAMLEDGER_LEDGER_KEY", "BEAMLEDGER_S3_SECRET_KEY"}, name) {
			t.Errorf("beamledger.env holds the secret %s; secrets go in as credentials", name)
		}
	}
}

func TestContainerfile(t *testing.T) {
	b, err := os.ReadFile("container/Containerfile")
	if err != nil {
		t.Fatal(err)
	}
	var froms []string
	var user, entry string
	for _, line := range strings.Split(string(b), "\n") {
		f := strings.Fields(line)
		if len(f) < 2 {
			continue
		}
		switch strings.ToUpper(f[0]) {
		case "FROM":
			froms = append(froms, line)
		case "USER":
			user = f[1]
		case "ENTRYPOINT":
			entry = line
		}
	}
	if len(froms) < 2 || !strings.Contains(froms[0], " AS ") {
		t.Errorf("want a multi-stage build, got stages %q", froms)
	}
	if u, _, _ := strings.Cut(user, ":"); u == "" || u == "0" || u == "root" {
		t.Errorf("the image runs as %q, want a numeric non-root user", user)
	}
	if !strings.Contains(string(b), "CGO_ENABLED=0") || !strings.Contains(string(b), "./cmd/beamledger") {
		t.Error("the build is not a static build of cmd/beamledger")
	}
	if !strings.Contains(entry, "beamledger") {
		t.Errorf("entrypoint %q", entry)
	}
}
