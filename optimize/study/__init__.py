"""The study model: the study file, its design space, spec, growth settings and run-folder record."""
