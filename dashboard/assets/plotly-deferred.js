/* shockflow: no chart is drawn empty while the page opens.

dcc.Graph draws every graph as it mounts, an empty one too (a full plotly draw: axes, margins,
drag layers). Every tab's panel stays on the page (hidden unless selected), so on the first load
the index chart's paint waited for a dozen and more empty charts drawn in the same task. Here the
first draw of a graph, when its figure is empty, is put off until the browser is idle; a figure
with data for that graph (its tab was shown and answered) is drawn at once and replaces it. A graph
drawn before is never put off (a chart emptied by its view clears at once). The promise dcc.Graph
waits on resolves once the graph is drawn, either way.

Loaded after plotly-cartesian.min.js (assets load in name order), which defines window.Plotly. */
(function () {
  "use strict";
  var P = window.Plotly;
  if (!P || typeof P.react !== "function" || P.__shockflowDeferred) { return; }
  var react = P.react;
  var waiting = new WeakMap(); // graph div -> {timer, resolve, reject} of a put-off empty draw
  var later = window.requestIdleCallback
    ? function (fn) { return {idle: window.requestIdleCallback(fn, {timeout: 3000})}; }
    : function (fn) { return {timeout: window.setTimeout(fn, 250)}; };
  var cancel = function (t) {
    if (t.idle !== undefined) { window.cancelIdleCallback(t.idle); } else { window.clearTimeout(t.timeout); }
  };
  function isEmpty(figure) {
    return !figure || typeof figure !== "object" || !Array.isArray(figure.data) || figure.data.length === 0;
  }
  function undrawn(gd) {
    return !!gd && typeof gd === "object" && gd._fullLayout === undefined;
  }
  P.react = function (gd) {
    var self = this, args = arguments;
    var pending = gd && typeof gd === "object" ? waiting.get(gd) : undefined;
    if (pending) { // a newer draw of this graph replaces the put-off empty one
      cancel(pending.timer);
      waiting.delete(gd);
    }
    if (args.length === 2 && undrawn(gd) && isEmpty(args[1])) {
      var put = new Promise(function (resolve, reject) {
        var entry = {resolve: resolve, reject: reject};
        entry.timer = later(function () {
          waiting.delete(gd);
          Promise.resolve(react.apply(self, args)).then(resolve, reject);
        });
        waiting.set(gd, entry);
      });
      if (pending) { put.then(pending.resolve, pending.reject); } // the one it replaces resolves too
      return put;
    }
    var result = react.apply(this, args);
    if (pending) { Promise.resolve(result).then(pending.resolve, pending.reject); }
    return result;
  };
  P.__shockflowDeferred = true;
})();
