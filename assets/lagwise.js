/* Lagwise: say so when a file is over the upload limit (the upload component refuses such
   files silently in the browser, before the server could answer). */
(function () {
  function limitOf(el) {
    var host = el && el.closest ? el.closest("[data-max-bytes]") : null;
    return host ? Number(host.getAttribute("data-max-bytes")) : NaN;
  }
  function report(files, el) {
    var limit = limitOf(el);
    var note = document.getElementById("upload-limit-note");
    if (!note || !files || !files.length || !isFinite(limit)) { return; }
    var f = files[0];
    if (f.size > limit) {
      note.textContent = f.name + " is " + (f.size / 1048576).toFixed(1) +
        " MB; the limit is " + (limit / 1048576).toFixed(0) +
        " MB. Load a smaller extract (for example fewer columns or a shorter sample).";
      note.className = "lw-message lw-error";
    } else {
      note.textContent = "";
      note.className = "lw-message";
    }
  }
  document.addEventListener("change", function (e) {
    if (e.target && e.target.type === "file") { report(e.target.files, e.target); }
  }, true);
  document.addEventListener("drop", function (e) {
    if (e.dataTransfer) { report(e.dataTransfer.files, e.target); }
  }, true);
})();
