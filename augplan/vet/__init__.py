"""Vetting (`augplan vet`): the vetted recipe, its file and the vetting job."""
