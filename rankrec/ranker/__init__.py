"""The learnt related-list ranker: candidates and features (:mod:`.features`), the model (:mod:`.model`)
and its training from the wiki's own held-out links (:mod:`.training`)."""
