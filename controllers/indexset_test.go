package controllers

import (
	"testing"

	"github.com/google/go-cmp/cmp"
)

func TestIndexSet(t *testing.T) {
	tests := map[string]struct {
		in      string
		want    string
		count   int
		wantErr bool
	}{
		"empty":           {in: "", want: "", count: 0},
		"single":          {in: "7", want: "7", count: 1},
		"ranges":          {in: "0-4,7", want: "0-4,7", count: 6},
		"merges adjacent": {in: "0-2,3,4,9-10", want: "0-4,9-10", count: 7},
		"unsorted input":  {in: "9,1,2", want: "1-2,9", count: 3},
		"bad range":       {in: "4-2", wantErr: true},
		"not a number":    {in: "a", wantErr: true},
		"negative":        {in: "-1", wantErr: true},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			s, err := parseIndexSet(tc.in)
			if (err != nil) != tc.wantErr {
				t.Fatalf("err = %v, wantErr %v", err, tc.wantErr)
			}
			if tc.wantErr {
				return
			}
			if diff := cmp.Diff(tc.want, s.String()); diff != "" {
				t.Errorf("String (-want,+got):\n%s", diff)
			}
			if len(s) != tc.count {
				t.Errorf("count = %d, want %d", len(s), tc.count)
			}
		})
	}
}
