// A classic script (module scripts cannot load from file:// pages): says so before anything else
// runs. Kept out of index.html so that the page's Content-Security-Policy needs no inline script.
if (location.protocol === "file:") {
  var m = document.getElementById("message");
  m.hidden = false;
  m.innerHTML = "<h2>Open this atlas through a web server</h2><p>Browsers do not let a page opened from a file read " +
    "the atlas beside it. Run <code>vitrine serve</code> on this folder and open the address it prints, or upload " +
    "the folder to any static web host.</p>";
  document.getElementById("loading").hidden = true;
  document.body.dataset.state = "error";
}
