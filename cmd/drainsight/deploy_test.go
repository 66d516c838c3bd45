package main

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
)

// The deployment examples in deploy/ agree with the program: the
// StatefulSet's replicas and its --shard host/N, the probes on the HTTP
// paths and default port, a grace period longer than serve's 30 s stop
// deadline, a volume per replica, a non-root hardened pod; the backfill Job
// indexed over the same N; the systemd unit hardened, given time to stop,
// and accepted by systemd-analyze verify when it is installed.
func TestDeployExamples(t *testing.T) {
	root := filepath.Join("..", "..", "deploy")
	read := func(name string) map[string]any {
		b, err := os.ReadFile(filepath.Join(root, name))
		if err != nil {
			t.Fatal(err)
		}
		var m map[string]any
		if err := yaml.Unmarshal(b, &m); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		return m
	}
	at := func(m any, path ...any) any {
		for _, p := range path {
			switch k := p.(type) {
			case string:
				mm, _ := m.(map[string]any)
				m = mm[k]
			case int:
				l, _ := m.([]any)
				if k >= len(l) {
					return nil
				}
				m = l[k]
			}
		}
		return m
	}
	ss := read("k8s/statefulset.yaml")
	if at(ss, "kind") != "StatefulSet" {
		t.Fatalf("statefulset.yaml: kind %v", at(ss, "kind"))
	}
	n, _ := at(ss, "spec", "replicas").(int)
	c := at(ss, "spec", "template", "spec", "containers", 0)
	args := fmt.Sprint(at(c, "args"))
	if !strings.Contains(args, fmt.Sprintf("--shard host/%d", n)) || n < 2 {
		t.Errorf("statefulset: %d replicas, args %s: want --shard host/%d", n, args, n)
	}
	for k := range n {
		if _, err := parseShard(fmt.Sprintf("%d/%d", k, n)); err != nil {
			t.Errorf("pod ordinal %d: %v", k, err)
		}
	}
	if at(c, "readinessProbe", "httpGet", "path") != "/readyz" || at(c, "livenessProbe", "httpGet", "path") != "/healthz" {
		t.Errorf("probes: %v %v", at(c, "readinessProbe"), at(c, "livenessProbe"))
	}
	if at(c, "ports", 0, "containerPort") != 9470 {
		t.Errorf("port %v, want the default 9470", at(c, "ports", 0, "containerPort"))
	}
	if g, _ := at(ss, "spec", "template", "spec", "terminationGracePeriodSeconds").(int); g <= int(stopDeadline.Seconds()) {
		t.Errorf("grace period %d s, want longer than serve's %v stop deadline", g, stopDeadline)
	}
	if at(ss, "spec", "volumeClaimTemplates", 0, "metadata", "name") != "state" {
		t.Errorf("no volume per replica for the state file")
	}
	if at(ss, "spec", "template", "spec", "securityContext", "runAsNonRoot") != true || at(c, "securityContext", "allowPrivilegeEscalation") != false {
		t.Errorf("pod not hardened: %v %v", at(ss, "spec", "template", "spec", "securityContext"), at(c, "securityContext"))
	}
	job := read("k8s/backfill-job.yaml")
	if at(job, "spec", "completionMode") != "Indexed" || at(job, "spec", "completions") != n || at(job, "spec", "parallelism") != n {
		t.Errorf("backfill job: %v, want Indexed over %d", at(job, "spec"), n)
	}
	env := at(job, "spec", "template", "spec", "containers", 0, "env", 0)
	if at(env, "name") != "DRAINSIGHT_SHARD" || at(env, "value") != fmt.Sprintf("$(JOB_COMPLETION_INDEX)/%d", n) {
		t.Errorf("backfill job env %v", env)
	}
	unit, err := os.ReadFile(filepath.Join(root, "drainsight.service"))
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"NoNewPrivileges=yes", "ProtectSystem=strict", "DynamicUser=yes", "CapabilityBoundingSet=", "ExecStart=/usr/local/bin/drainsight serve --config "} {
		if !strings.Contains(string(unit), "\n"+want) {
			t.Errorf("drainsight.service lacks %s", want)
		}
	}
	if m := regexp.MustCompile(`\nTimeoutStopSec=(\d+)`).FindStringSubmatch(string(unit)); m == nil {
		t.Errorf("drainsight.service has no TimeoutStopSec")
	} else if s, _ := strconv.Atoi(m[1]); s <= int(stopDeadline.Seconds()) {
		t.Errorf("TimeoutStopSec %d, want longer than %v", s, stopDeadline)
	}
	if _, err := exec.LookPath("systemd-analyze"); err != nil {
		t.Log("systemd-analyze not installed: unit not verified")
		return
	}
	// verify checks that ExecStart exists: a real binary stands in
	tmp := filepath.Join(t.TempDir(), "drainsight.service")
	if err := os.WriteFile(tmp, []byte(strings.ReplaceAll(string(unit), "/usr/local/bin/drainsight", "/bin/true")), 0o644); err != nil {
		t.Fatal(err)
	}
	// only what it says about this unit counts (a machine without a
	// running systemd adds remarks of its own)
	out, err := exec.Command("systemd-analyze", "verify", tmp).CombinedOutput()
	for _, line := range strings.Split(string(out), "\n") {
		if strings.Contains(line, "drainsight.service") {
			t.Errorf("systemd-analyze verify (%v): %s", err, line)
		}
	}
}
