"""The front end: command line, evaluation reports, sample metrics, pictures and the demo."""
