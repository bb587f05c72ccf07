package infer

import (
	"fmt"
	"path/filepath"
	"strings"

	"pdwave/simulate"
)

// RealGroup labels the pooled row over the real-image scenes.
const RealGroup = "real"

// SimulatedStudyScenes returns the scenes of a study with the simulator
// (SimulatedSceneSource with base) for a comma-separated selection of:
//
//   - "granulation": synthetic granulation with the default parameters;
//   - "real": one scene per image of the real-image set, in its order,
//     each labelled by its file name without extension (e.g. "brick");
//   - an image's label or file name ("brick", "brick.fits"): that image;
//   - "mix": the default scene mix (simulate.SceneMix: granulation or a
//     window of any image, even odds), labelled "mix".
//
// Image scenes keep the set's contrast range and form the group "real"
// (a pooled row when two or more are chosen). images is called, once, only
// when the selection needs the real images. It errors for an empty,
// unknown or repeated entry.
func SimulatedStudyScenes(base simulate.Config, selection string, images func() (*simulate.ImageScene, error)) ([]StudyScene, error) {
	var set *simulate.ImageScene
	load := func() (*simulate.ImageScene, error) {
		if set != nil {
			return set, nil
		}
		s, err := images()
		if err != nil {
			return nil, err
		}
		if s == nil || len(s.Images) == 0 {
			return nil, fmt.Errorf("study scenes: the real-image set is empty")
		}
		set = s
		return s, nil
	}
	var scenes []StudyScene
	for _, tok := range strings.Split(selection, ",") {
		tok = strings.TrimSpace(tok)
		sc, err := studyScenesFor(base, tok, load)
		if err != nil {
			return nil, err
		}
		scenes = append(scenes, sc...)
	}
	seen := make(map[string]bool)
	for _, sc := range scenes {
		if seen[sc.Name] {
			return nil, fmt.Errorf("study scenes: %q chosen twice in %q", sc.Name, selection)
		}
		seen[sc.Name] = true
	}
	return scenes, nil
}

// studyScenesFor returns the scenes of one selection entry.
func studyScenesFor(base simulate.Config, tok string, load func() (*simulate.ImageScene, error)) ([]StudyScene, error) {
	switch tok {
	case "":
		return nil, fmt.Errorf("study scenes: empty entry in the selection")
	case "granulation":
		return []StudyScene{{Name: tok, Source: SimulatedSceneSource(base, simulate.GranulationScene{})}}, nil
	}
	set, err := load()
	if err != nil {
		return nil, fmt.Errorf("study scenes: %q needs the real images: %w", tok, err)
	}
	if tok == "mix" {
		return []StudyScene{{Name: tok, Source: SimulatedSceneSource(base, simulate.SceneMix(simulate.GranulationParams{}, set))}}, nil
	}
	var out, all []StudyScene
	var labels []string
	for _, im := range set.Images {
		label := strings.TrimSuffix(im.Name, filepath.Ext(im.Name))
		one := &simulate.ImageScene{Images: []simulate.SceneImage{im}, Contrast: set.Contrast}
		sc := StudyScene{Name: label, Group: RealGroup, Source: SimulatedSceneSource(base, one)}
		all = append(all, sc)
		labels = append(labels, label)
		if tok == label || tok == im.Name {
			out = append(out, sc)
		}
	}
	if tok == RealGroup {
		return all, nil
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("study scenes: unknown scene %q, want granulation, real, mix or one of %s", tok, strings.Join(labels, ", "))
	}
	return out, nil
}
