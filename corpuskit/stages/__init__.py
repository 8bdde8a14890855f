"""One module per stage; ``registry.STAGES`` lists them in pipeline order."""
