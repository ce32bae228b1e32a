// app.js: small conveniences of the lotwatch pages. Every page works
// without it; it only saves a click.
(function () {
  'use strict';
  function start() {
    // A <select data-autosubmit> sends its form when it changes.
    var sel = document.querySelectorAll('select[data-autosubmit]');
    for (var i = 0; i < sel.length; i++) {
      sel[i].addEventListener('change', function (ev) {
        if (ev.target.form) { ev.target.form.submit(); }
      });
      var b = sel[i].form && sel[i].form.querySelector('[data-autosubmit-button]');
      if (b) { b.hidden = true; }
    }
    // Custom period fields are shown only for the custom period.
    var period = document.getElementById('period');
    var custom = document.getElementById('custom-period');
    if (period && custom) {
      var sync = function () { custom.hidden = period.value !== 'custom'; };
      period.addEventListener('change', sync);
      sync();
    }
  }
  if (document.readyState === 'loading') {
    document.addEventListener('DOMContentLoaded', start);
  } else {
    start();
  }
})();
