"""``python -m fewshot.cli``: the same as the ``fewshot`` command."""

from fewshot.cli.commands import main

main()
