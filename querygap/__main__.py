from querygap.cli import app

app(prog_name="querygap")
