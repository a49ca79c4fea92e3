"""Finding and following people: bundled models, pose and face detection, COCO-17 skeletons, the tracker."""
