"""augplan: plan and vet image augmentation recipes before a long training run."""

__version__ = "0.1.0"

__all__ = ["__version__", "load_recipe", "Augmenter"]


def __getattr__(name):
    # Lazy, so `import augplan` stays light for the command line's start-up.
    if name in ("load_recipe", "Augmenter"):
        from augplan.augment import augmenter

        return getattr(augmenter, name)
    raise AttributeError(f"module 'augplan' has no attribute {name!r}")
