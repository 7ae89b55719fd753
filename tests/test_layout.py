"""The contributor guide's layout section matches the tree (issue: one concept, one place)."""
import pathlib
import re

ROOT = pathlib.Path(__file__).resolve().parents[1]


def _listed() -> list[str]:
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    block = re.search(r"## Layout\n.*?```\n(.*?)```", text, re.S).group(1)
    paths = []
    for line in block.splitlines():
        token = line.split()[0] if line.strip() else ""
        if line.startswith("  "):
            token = "pipeline/" + token
        if token:
            paths.append(token)
    return paths


def test_every_listed_path_exists():
    missing = [p for p in _listed() if not (ROOT / p).exists()]
    assert not missing, f"DEVELOPERS.md lists paths that do not exist: {missing}"


def test_every_module_and_package_is_listed():
    listed = {p.rstrip("/") for p in _listed()}
    tree = set()
    for path in (ROOT / "pipeline").iterdir():
        rel = path.relative_to(ROOT).as_posix()
        if path.is_dir() and (path / "__init__.py").exists():
            tree.add(rel)
            tree.update(sub.relative_to(ROOT).as_posix() for sub in path.iterdir()
                        if sub.is_dir() and (sub / "__init__.py").exists())
        elif path.suffix == ".py" and path.name != "__init__.py":
            tree.add(rel)
    unlisted = sorted(tree - listed)
    assert not unlisted, f"modules or packages missing from the DEVELOPERS.md layout: {unlisted}"


def test_no_module_over_400_lines():
    long = {p.relative_to(ROOT).as_posix(): n for p in (ROOT / "pipeline").rglob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > 400}
    assert not long, f"split these by concept: {long}"


def test_no_private_names_imported_across_modules():
    pattern = re.compile(r"^\s*from\s+[\w.]+\s+import\s+(.*)$")
    offenders = []
    for path in (ROOT / "pipeline").rglob("*.py"):
        for line in path.read_text(encoding="utf-8").splitlines():
            m = pattern.match(line)
            if m and any(name.strip().split(" as ")[0].startswith("_") and name.strip() != "__future__"
                         for name in m.group(1).strip("()").split(",") if name.strip()):
                if "__future__" not in line:
                    offenders.append(f"{path.relative_to(ROOT)}: {line.strip()}")
    assert not offenders, offenders


def test_no_branching_on_a_loss_or_family_name_outside_its_registry():
    pattern = re.compile(r'(loss|self|kernel|family)\.(name|key) *(==|!=|in) |(==|!=) *"l[12]"|\["l[12]"\]')
    offenders = []
    for path in (ROOT / "pipeline").rglob("*.py"):
        rel = path.relative_to(ROOT).as_posix()
        if rel in ("pipeline/losses.py", "pipeline/losses_margin.py", "pipeline/models/families.py"):
            continue
        offenders += [f"{rel}: {line.strip()}" for line in path.read_text(encoding="utf-8").splitlines()
                      if pattern.search(line)]
    assert not offenders, offenders
