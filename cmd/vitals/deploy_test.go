package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/check"
)

// job is the part of a Kubernetes batch/v1 Job the deployment relies on
// (field names from the Kubernetes API reference, batch/v1 JobSpec).
type job struct {
	APIVersion string `json:"apiVersion"`
	Kind       string `json:"kind"`
	Spec       struct {
		CompletionMode string `json:"completionMode"`
		Completions    int    `json:"completions"`
		Parallelism    int    `json:"parallelism"`
		Template       struct {
			Spec struct {
				RestartPolicy string `json:"restartPolicy"`
				Containers    []struct {
					Command []string `json:"command"`
					Args    []string `json:"args"`
					Env     []struct {
						Name      string `json:"name"`
						ValueFrom struct {
							FieldRef struct {
								FieldPath string `json:"fieldPath"`
							} `json:"fieldRef"`
						} `json:"valueFrom"`
					} `json:"env"`
					VolumeMounts []struct {
						Name, MountPath string
					} `json:"volumeMounts"`
				} `json:"containers"`
				Volumes []struct {
					Name string `json:"name"`
					PVC  struct {
						ClaimName string `json:"claimName"`
					} `json:"persistentVolumeClaim"`
				} `json:"volumes"`
			} `json:"spec"`
		} `json:"template"`
	} `json:"spec"`
}

func readJob(t *testing.T, path string) job {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var j job
	d := json.NewDecoder(strings.NewReader(string(b)))
	if err := d.Decode(&j); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	if j.APIVersion != "batch/v1" || j.Kind != "Job" || len(j.Spec.Template.Spec.Containers) != 1 || j.Spec.Template.Spec.RestartPolicy != "Never" {
		t.Fatalf("%s: want one batch/v1 Job with one container and restartPolicy Never, got %+v", path, j)
	}
	return j
}

// The Kubernetes manifests: the shard Job is Indexed, its completions are
// the N of --shard K/N, JOB_COMPLETION_INDEX (the pod's completion index
// annotation) becomes K, and its command line parses with vitals check's
// own flags into a valid shard and partial for every index; the merge Job
// reads those partial files from the same claim with vitals merge's flags.
func TestKubernetesManifests(t *testing.T) {
	shards := readJob(t, "../../deploy/kubernetes/shards.json")
	s := shards.Spec
	if s.CompletionMode != "Indexed" || s.Completions < 1 || s.Parallelism < 1 {
		t.Fatalf("shard Job: completionMode %q, completions %d, parallelism %d", s.CompletionMode, s.Completions, s.Parallelism)
	}
	ct := s.Template.Spec.Containers[0]
	if len(ct.Env) != 1 || ct.Env[0].Name != "JOB_COMPLETION_INDEX" || ct.Env[0].ValueFrom.FieldRef.FieldPath != "metadata.annotations['batch.kubernetes.io/job-completion-index']" {
		t.Fatalf("shard Job: JOB_COMPLETION_INDEX not from the completion index annotation: %+v", ct.Env)
	}
	if len(ct.Command) != 1 || ct.Command[0] != "vitals" || len(ct.Args) < 2 || ct.Args[0] != "check" {
		t.Fatalf("shard Job: command %v %v, want vitals check ...", ct.Command, ct.Args)
	}
	parts := map[string]bool{}
	for k := 0; k < s.Completions; k++ {
		var args []string
		for _, a := range ct.Args[1:] {
			args = append(args, strings.ReplaceAll(a, "$(JOB_COMPLETION_INDEX)", fmt.Sprint(k)))
		}
		c := newCommon("check", io.Discard)
		if err := c.fs.Parse(args); err != nil {
			t.Fatalf("index %d: vitals check %v: %v", k, args, err)
		}
		sh, err := check.ParseShard(c.shard)
		if err != nil || sh.K != k || sh.N != s.Completions {
			t.Fatalf("index %d: --shard %q gives %+v (%v), want %d/%d", k, c.shard, sh, err, k, s.Completions)
		}
		if c.batch < 1 || c.fs.NArg() != 1 || len(c.data) == 0 || c.partial == "" || parts[c.partial] {
			t.Fatalf("index %d: want a model, --data, --batch and a partial file of its own, got %v", k, args)
		}
		parts[c.partial] = true
	}
	merge := readJob(t, "../../deploy/kubernetes/merge.json")
	mc := merge.Spec.Template.Spec.Containers[0]
	script := strings.Join(mc.Args, " ")
	_, rest, ok := strings.Cut(script, "vitals merge ")
	if !ok {
		t.Fatalf("merge Job runs %q, want vitals merge", script)
	}
	line, _, _ := strings.Cut(rest, ">")
	c, _ := mergeFlags(io.Discard)
	if err := c.fs.Parse(strings.Fields(line)); err != nil {
		t.Fatalf("vitals merge %s: %v", line, err)
	}
	if c.fs.NArg() != 1 || c.out == "" {
		t.Fatalf("vitals merge %s: want one glob of partials and --out", line)
	}
	glob := c.fs.Arg(0)
	for p := range parts {
		if ok, _ := pathMatch(glob, p); !ok {
			t.Errorf("merge glob %q misses shard partial %q", glob, p)
		}
	}
	claim := func(j job) string {
		v := j.Spec.Template.Spec.Volumes
		m := j.Spec.Template.Spec.Containers[0].VolumeMounts
		if len(v) != 1 || len(m) != 1 || m[0].Name != v[0].Name {
			t.Fatalf("want one volume mounted: %+v %+v", v, m)
		}
		return v[0].PVC.ClaimName + "@" + m[0].MountPath
	}
	if a, b := claim(shards), claim(merge); a != b || a == "@" {
		t.Errorf("shards write to %s, merge reads %s: want the same claim and mount", a, b)
	}
}

func pathMatch(glob, p string) (bool, error) { return filepath.Match(glob, p) }
