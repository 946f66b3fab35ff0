"""querygap: find the searches your site fails, and prove the fix worked."""

__version__ = "0.1.0"
