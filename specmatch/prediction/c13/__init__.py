"""13C prediction: environment perception (:mod:`.environment`), the increment tables
(:mod:`.tables`) and the predictor (:mod:`.predictor`)."""
