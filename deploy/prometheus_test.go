package deploy

import (
	"os"
	"regexp"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"tautline/server"
)

// Every tautline metric and label value the alerting rules name is one the
// daemon exports, so a renamed metric cannot silence an alert.
func TestAlertRulesNameExportedMetrics(t *testing.T) {
	data, err := os.ReadFile("prometheus/tautline-alerts.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var rules struct {
		Groups []struct {
			Name  string `yaml:"name"`
			Rules []struct {
				Alert       string            `yaml:"alert"`
				Expr        string            `yaml:"expr"`
				Labels      map[string]string `yaml:"labels"`
				Annotations map[string]string `yaml:"annotations"`
			} `yaml:"rules"`
		} `yaml:"groups"`
	}
	if err := yaml.Unmarshal(data, &rules); err != nil {
		t.Fatal(err)
	}

	// What the daemon exports for a cell, with every label child made.
	m := server.NewMetrics()
	m.Cell("cell-a", []string{"left.shoulder"}, []int{0})
	families, err := m.Registry.Gather()
	if err != nil {
		t.Fatal(err)
	}
	labelValues := map[string]map[string]map[string]bool{} // metric → label → values
	for _, f := range families {
		name := f.GetName()
		labelValues[name] = map[string]map[string]bool{}
		for _, s := range f.GetMetric() {
			for _, l := range s.GetLabel() {
				if labelValues[name][l.GetName()] == nil {
					labelValues[name][l.GetName()] = map[string]bool{}
				}
				labelValues[name][l.GetName()][l.GetValue()] = true
			}
		}
	}

	// A metric selector: name, then optional {label="value", ...}.
	selector := regexp.MustCompile(`\b(tautline_[a-z_]+?)(_bucket|_count|_sum)?\b(\{([^}]*)\})?`)
	matcher := regexp.MustCompile(`([a-z_]+)\s*(=|!=|=~|!~)\s*"([^"]*)"`)
	n := 0
	for _, g := range rules.Groups {
		for _, r := range g.Rules {
			if r.Alert == "" || r.Expr == "" || r.Labels["severity"] == "" || r.Annotations["summary"] == "" {
				t.Errorf("group %s: rule %q lacks an alert name, expression, severity or summary", g.Name, r.Alert)
			}
			for _, sel := range selector.FindAllStringSubmatch(r.Expr, -1) {
				n++
				name, suffix := sel[1], sel[2]
				labels, ok := labelValues[name]
				if !ok {
					t.Errorf("%s: %s%s is not a metric the daemon exports", r.Alert, name, suffix)
					continue
				}
				for _, mt := range matcher.FindAllStringSubmatch(sel[4], -1) {
					label, op, value := mt[1], mt[2], mt[3]
					if label == "le" {
						continue
					}
					vals, ok := labels[label]
					if !ok {
						t.Errorf("%s: %s has no label %q", r.Alert, name, label)
						continue
					}
					if (op == "=" || op == "!=") && !vals[value] {
						t.Errorf("%s: %s{%s} is never %q; it takes %v", r.Alert, name, label, value, keys(vals))
					}
				}
			}
		}
	}
	if n == 0 {
		t.Fatal("the rules name no tautline metric")
	}
}

func keys(m map[string]bool) string {
	var k []string
	for v := range m {
		k = append(k, v)
	}
	return strings.Join(k, ", ")
}
