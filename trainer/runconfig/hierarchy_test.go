package runconfig

import (
	"strings"
	"testing"
)

func TestValidateHierarchy(t *testing.T) {
	cases := map[string]struct {
		h     Hierarchy
		field string // "" means valid
	}{
		"depot, item, total": {Hierarchy{Levels: [][]string{{"depot"}, {"item"}, {}}, ShardBy: []string{"depot"}, Method: "StructuralScaling"}, ""},
		"total only":         {Hierarchy{Levels: [][]string{{}}, Method: "MinTShrink"}, ""},
		"no levels":          {Hierarchy{Method: "OLS"}, "hierarchy.levels"},
		"unknown column":     {Hierarchy{Levels: [][]string{{"region"}}, Method: "OLS"}, "hierarchy.levels[0][0]"},
		"every key column":   {Hierarchy{Levels: [][]string{{"depot", "item"}}, Method: "OLS"}, "hierarchy.levels[0]"},
		"column twice":       {Hierarchy{Levels: [][]string{{}, {"depot", "depot"}}, Method: "OLS"}, "hierarchy.levels[1][1]"},
		"same level twice":   {Hierarchy{Levels: [][]string{{}, {"depot"}, {}}, Method: "OLS"}, "hierarchy.levels[2]"},
		"unknown method":     {Hierarchy{Levels: [][]string{{}}, Method: "TopDown"}, "hierarchy.method"},
		"lower-case method":  {Hierarchy{Levels: [][]string{{}}, Method: "ols"}, "hierarchy.method"},
		"shard by unknown":   {Hierarchy{Levels: [][]string{{}}, ShardBy: []string{"region"}, Method: "OLS"}, "hierarchy.shardBy[0]"},
		"shard by every key": {Hierarchy{Levels: [][]string{{}}, ShardBy: []string{"item", "depot"}, Method: "OLS"}, "hierarchy.shardBy"},
	}
	for name, c := range cases {
		cfg := valid()
		h := c.h
		cfg.Hierarchy = &h
		err := cfg.Validate()
		switch {
		case c.field == "" && err != nil:
			t.Errorf("%s: %v", name, err)
		case c.field != "" && (err == nil || !strings.HasPrefix(err.Error(), c.field)):
			t.Errorf("%s: got %v, want an error starting with %s", name, err, c.field)
		}
	}
	cfg := valid()
	cfg.Hierarchy = &Hierarchy{Levels: [][]string{{}}, Method: "OLS"}
	cfg.Source.Columns.Covariates = []string{"price"}
	cfg.Features = &Features{Covariates: []string{"price"}}
	if err := cfg.Validate(); err == nil || !strings.HasPrefix(err.Error(), "hierarchy:") {
		t.Errorf("covariate features with a hierarchy: got %v", err)
	}
}

func TestLevelName(t *testing.T) {
	keys := []string{"category", "item", "depot"}
	for _, c := range []struct {
		level []string
		want  string
	}{{nil, "total"}, {[]string{"depot"}, "depot"}, {[]string{"depot", "category"}, "category+depot"}, {keys, "category+item+depot"}} {
		if got := LevelName(keys, c.level); got != c.want {
			t.Errorf("LevelName(%v) = %q, want %q", c.level, got, c.want)
		}
	}
}
