# Makes the templates folder installable as the package caseprep.templates.
