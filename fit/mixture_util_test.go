package fit

import (
	"encoding/csv"
	"encoding/json"
	"os"
	"path/filepath"
	"strconv"
	"testing"
)

// mixReadCSV reads a data file of testdata (header, then id and features)
// and returns the features, row-major, and their number.
func mixReadCSV(t testing.TB, name string) ([]float64, int) {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	d := len(recs[0]) - 1
	x := make([]float64, 0, (len(recs)-1)*d)
	for i, rec := range recs[1:] {
		for _, s := range rec[1:] {
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				t.Fatalf("%s: line %d: %v", name, i+2, err)
			}
			x = append(x, v)
		}
	}
	return x, d
}

// mixReadLabels reads the 0-based codes of testdata/iris_labels.csv.
func mixReadLabels(t testing.TB) []int {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "testdata", "iris_labels.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	out := make([]int, 0, len(recs)-1)
	for _, rec := range recs[1:] {
		v, err := strconv.Atoi(rec[2])
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, v)
	}
	return out
}

// mixReference is one file written by testdata/reference/gmm_reference.py.
type mixReference struct {
	Library  string                     `json:"library"`
	Settings string                     `json:"settings"`
	N        int                        `json:"n"`
	D        int                        `json:"d"`
	K        int                        `json:"k"`
	RegCovar float64                    `json:"reg_covar"`
	Fits     map[string]mixReferenceFit `json:"fits"`
}

type mixReferenceFit struct {
	Weights         []float64                 `json:"weights"`
	Means           [][]float64               `json:"means"`
	Covs            [][][]float64             `json:"covs"`
	LogLikelihood   float64                   `json:"log_likelihood"`
	NParameters     int                       `json:"n_parameters"`
	BIC             float64                   `json:"bic"`
	AIC             float64                   `json:"aic"`
	MatchedAccuracy float64                   `json:"matched_accuracy"`
	LocalOptima     map[string]map[string]int `json:"local_optima"`
}

func mixReadReference(t testing.TB, name string) mixReference {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	var r mixReference
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	return r
}
