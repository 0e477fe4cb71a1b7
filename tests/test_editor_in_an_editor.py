"""`seqlang lsp` in an editor's built-in client: a headless Neovim (Debian package
`neovim`) opens a messy file, applies the two quick fixes, formats, saves, and asks for
completion. Skipped where Neovim is not installed; marked `slow`."""
from __future__ import annotations

import shutil
import subprocess
import sys

import pytest

from conftest import ROOT

NVIM = shutil.which("nvim")
pytestmark = [pytest.mark.skipif(NVIM is None, reason="Neovim is not installed"),
              pytest.mark.slow]  # half a minute on a loaded machine: the editor starts the server

MESSY = """use   "millpond.rig"
site c0=cs at (0,0) um
sequence messy {
pulse mw_cx   area pi/2
    wait 100
}
"""
TIDY = """use "millpond.rig"
site c0 = cs at (0, 0) um
sequence messy {
  pulse mw_cs area pi/2
  wait 100 ns
}
"""

SCRIPT = r"""
local out = {}
vim.cmd("edit @FILE@")
local buf = vim.api.nvim_get_current_buf()
local id = vim.lsp.start_client({name = "seqlang", cmd = {@PYTHON@, "-m", "seqlang", "lsp"},
                                 cmd_env = {PYTHONPATH = @ROOT@}, root_dir = @DIR@})
vim.lsp.buf_attach_client(buf, id)
vim.wait(60000, function() return #vim.diagnostic.get(buf) == 2 end, 50)
table.insert(out, "diagnostics " .. #vim.diagnostic.get(buf))
local params = {textDocument = {uri = vim.uri_from_bufnr(buf)},
                range = {start = {line = 3, character = 0}, ["end"] = {line = 4, character = 20}},
                context = {diagnostics = {}}}
for _, reply in pairs(vim.lsp.buf_request_sync(buf, "textDocument/codeAction", params, 30000) or {}) do
  for _, action in ipairs(reply.result or {}) do
    if action.isPreferred then vim.lsp.util.apply_workspace_edit(action.edit, "utf-16") end
  end
end
vim.lsp.buf.formatting_sync(nil, 30000)
vim.cmd("write")
vim.wait(60000, function() return #vim.diagnostic.get(buf) == 0 end, 50)
table.insert(out, "diagnostics " .. #vim.diagnostic.get(buf))
local at = {textDocument = {uri = vim.uri_from_bufnr(buf)}, position = {line = 3, character = 8}}
for _, reply in pairs(vim.lsp.buf_request_sync(buf, "textDocument/completion", at, 30000) or {}) do
  local labels = {}
  for _, item in ipairs((reply.result or {}).items or {}) do table.insert(labels, item.label) end
  table.insert(out, "completion " .. table.concat(labels, ","))
end
vim.fn.writefile(out, @OUT@)
vim.cmd("qa!")
"""


def test_quick_fixes_format_on_save_and_completion_in_neovim(tmp_path):
    shutil.copy(ROOT / "programs" / "millpond.rig", tmp_path / "millpond.rig")
    (tmp_path / "messy.seq").write_text(MESSY)
    script = SCRIPT
    for name, value in (("FILE", tmp_path / "messy.seq"), ("PYTHON", sys.executable), ("ROOT", ROOT),
                        ("DIR", tmp_path), ("OUT", tmp_path / "out.txt")):
        script = script.replace(f"@{name}@", f'"{value}"' if name != "FILE" else str(value))
    (tmp_path / "script.lua").write_text(script)
    subprocess.run([NVIM, "--headless", "-u", "NONE", "-c", f"luafile {tmp_path / 'script.lua'}"],
                   cwd=tmp_path, timeout=240, capture_output=True)
    # The two diagnostics (unknown drive, plain number), then none after the fixes.
    assert (tmp_path / "out.txt").read_text().splitlines() == [
        "diagnostics 2", "diagnostics 0", "completion mw_na,mw_cs,ryd_na,ryd_cs"]
    assert (tmp_path / "messy.seq").read_text() == TIDY
    from seqlang.editor.formatter import format_text
    assert format_text(TIDY, "messy.seq") == TIDY  # the layout `seqlang fmt` gives
