// hopmap's 3D view of the channel networks: WebGL 1, no libraries, no network access.
// Reads the scene from the JSON script element #v3d-data; on any failure the static
// projection stays visible and nothing is logged.
(function () {
  "use strict";
  var root = document.getElementById("v3d");
  var canvas = document.getElementById("v3d-canvas");
  var dataEl = document.getElementById("v3d-data");
  if (!root || !canvas || !dataEl) { return; }
  var gl = null;
  try {
    var attrs = { antialias: true, preserveDrawingBuffer: true };
    gl = canvas.getContext("webgl", attrs) || canvas.getContext("experimental-webgl", attrs);
  } catch (e) { gl = null; }
  if (!gl) { return; }
  try { start(JSON.parse(dataEl.textContent)); } catch (e) { root.classList.remove("webgl"); }

  function start(scene) {
    root.classList.add("webgl");
    var BG = [0xfb / 255, 0xfc / 255, 0xfd / 255];
    function bytes(s) {
      var bin = atob(s), u = new Uint8Array(bin.length);
      for (var i = 0; i < bin.length; i++) { u[i] = bin.charCodeAt(i); }
      return u.buffer;
    }
    function compile(type, src) {
      var s = gl.createShader(type);
      gl.shaderSource(s, src);
      gl.compileShader(s);
      if (!gl.getShaderParameter(s, gl.COMPILE_STATUS)) { throw new Error("shader"); }
      return s;
    }
    function program(vs, fs) {
      var p = gl.createProgram();
      gl.attachShader(p, compile(gl.VERTEX_SHADER, vs));
      gl.attachShader(p, compile(gl.FRAGMENT_SHADER, fs));
      gl.linkProgram(p);
      if (!gl.getProgramParameter(p, gl.LINK_STATUS)) { throw new Error("link"); }
      return p;
    }
    function buffer(target, array) {
      var b = gl.createBuffer();
      gl.bindBuffer(target, b);
      gl.bufferData(target, array, gl.STATIC_DRAW);
      return b;
    }
    var LIGHT = "normalize(vec3(0.3, 0.5, 1.0))";
    var surf = program(
      "attribute vec3 p; attribute vec3 n; uniform mat4 m; uniform mat3 r; varying vec3 vn;" +
      "void main() { vn = r * n; gl_Position = m * vec4(p, 1.0); }",
      "precision mediump float; varying vec3 vn; uniform vec3 c;" +
      "void main() { vec3 nn = normalize(vn); vec3 l = " + LIGHT + ";" +
      " float d = abs(dot(nn, l)); float s = pow(abs(dot(nn, normalize(l + vec3(0.0, 0.0, 1.0)))), 30.0);" +
      " gl_FragColor = vec4(c * (0.38 + 0.62 * d) + 0.22 * s, 1.0); }");
    var dots = program(
      "attribute vec3 p; attribute vec4 col; uniform mat4 m; uniform float px; varying vec3 vc;" +
      "void main() { vc = col.rgb; gl_Position = m * vec4(p, 1.0); gl_PointSize = max(2.0, 2.0 * col.a * px); }",
      "precision mediump float; varying vec3 vc;" +
      "void main() { vec2 d = gl_PointCoord * 2.0 - 1.0; float r2 = dot(d, d); if (r2 > 1.0) discard;" +
      " vec3 n = vec3(d.x, -d.y, sqrt(1.0 - r2)); float l = 0.35 + 0.65 * max(dot(n, " + LIGHT + "), 0.0);" +
      " gl_FragColor = vec4(vc * l * (r2 > 0.8 ? 0.6 : 1.0), 1.0); }");
    var lines = program(
      "attribute vec3 p; uniform mat4 m; void main() { gl_Position = m * vec4(p, 1.0); }",
      "precision mediump float; uniform vec3 c; void main() { gl_FragColor = vec4(c, 1.0); }");

    // surfaces
    var nets = scene.networks.map(function (n) {
      var q = new Uint16Array(bytes(n.pos));
      var pos = new Float32Array(q.length), nor = new Float32Array(q.length);
      for (var i = 0; i < q.length; i++) { pos[i] = scene.lo[i % 3] + q[i] * scene.step; }
      var wide = n.wide && gl.getExtension("OES_element_index_uint");
      if (n.wide && !wide) { return null; }
      var idx = n.wide ? new Uint32Array(bytes(n.idx)) : new Uint16Array(bytes(n.idx));
      // area-weighted vertex normals, outward (triangles are counter-clockwise from outside)
      for (var t = 0; t < idx.length; t += 3) {
        var a = 3 * idx[t], b = 3 * idx[t + 1], c = 3 * idx[t + 2];
        var ux = pos[b] - pos[a], uy = pos[b + 1] - pos[a + 1], uz = pos[b + 2] - pos[a + 2];
        var vx = pos[c] - pos[a], vy = pos[c + 1] - pos[a + 1], vz = pos[c + 2] - pos[a + 2];
        var nx = uy * vz - uz * vy, ny = uz * vx - ux * vz, nz = ux * vy - uy * vx;
        [a, b, c].forEach(function (v) { nor[v] += nx; nor[v + 1] += ny; nor[v + 2] += nz; });
      }
      for (var k = 0; k < nor.length; k += 3) {
        var l = Math.sqrt(nor[k] * nor[k] + nor[k + 1] * nor[k + 1] + nor[k + 2] * nor[k + 2]) || 1;
        nor[k] /= l; nor[k + 1] /= l; nor[k + 2] /= l;
      }
      return {
        pos: buffer(gl.ARRAY_BUFFER, pos), nor: buffer(gl.ARRAY_BUFFER, nor),
        idx: buffer(gl.ELEMENT_ARRAY_BUFFER, idx), count: idx.length,
        type: n.wide ? gl.UNSIGNED_INT : gl.UNSIGNED_SHORT,
        colour: n.colour.map(function (x) { return x / 255; }), shown: false
      };
    });
    // atoms: x, y, z, radius, r, g, b
    var ap = new Float32Array(scene.atoms.length * 3), ac = new Float32Array(scene.atoms.length * 4);
    scene.atoms.forEach(function (a, i) {
      ap[3 * i] = a[0]; ap[3 * i + 1] = a[1]; ap[3 * i + 2] = a[2];
      ac[4 * i] = a[4] / 255; ac[4 * i + 1] = a[5] / 255; ac[4 * i + 2] = a[6] / 255; ac[4 * i + 3] = a[3];
    });
    var atomPos = buffer(gl.ARRAY_BUFFER, ap), atomCol = buffer(gl.ARRAY_BUFFER, ac);
    var showAtoms = true;
    var ev = [];
    scene.edges.forEach(function (e) { ev.push(e[0][0], e[0][1], e[0][2], e[1][0], e[1][1], e[1][2]); });
    var edgeBuf = buffer(gl.ARRAY_BUFFER, new Float32Array(ev));
    var axisBufs = scene.axes.map(function (v) {
      var o = scene.corner;
      return buffer(gl.ARRAY_BUFFER, new Float32Array([o[0], o[1], o[2], o[0] + v[0], o[1] + v[1], o[2] + v[2]]));
    });
    var labels = ["a", "b", "c"].map(function (t) {
      var s = document.createElement("span");
      s.className = "axis-label";
      s.textContent = t;
      canvas.parentNode.appendChild(s);
      return s;
    });

    var yaw = scene.yaw, pitch = scene.pitch, zoom = 1.0;
    function rotation() {
      var cy = Math.cos(yaw * Math.PI / 180), sy = Math.sin(yaw * Math.PI / 180);
      var cp = Math.cos(pitch * Math.PI / 180), sp = Math.sin(pitch * Math.PI / 180);
      // the same as view_rotation in viewer.rs: pitch * yaw * ((x, y, z) -> (x, z, -y))
      return compose(cy, sy, cp, sp);
    }
    function compose(cy, sy, cp, sp) {
      var base = [[1, 0, 0], [0, 0, 1], [0, -1, 0]];
      var Y = [[cy, 0, sy], [0, 1, 0], [-sy, 0, cy]];
      var P = [[1, 0, 0], [0, cp, -sp], [0, sp, cp]];
      return mul(P, mul(Y, base));
    }
    function mul(a, b) {
      var m = [[0, 0, 0], [0, 0, 0], [0, 0, 0]];
      for (var i = 0; i < 3; i++) { for (var j = 0; j < 3; j++) {
        m[i][j] = a[i][0] * b[0][j] + a[i][1] * b[1][j] + a[i][2] * b[2][j];
      } }
      return m;
    }
    function draw() {
      var dpr = window.devicePixelRatio || 1;
      var w = Math.max(1, Math.round(canvas.clientWidth * dpr)), h = Math.max(1, Math.round(canvas.clientHeight * dpr));
      if (canvas.width !== w || canvas.height !== h) { canvas.width = w; canvas.height = h; }
      gl.viewport(0, 0, w, h);
      gl.clearColor(BG[0], BG[1], BG[2], 1);
      gl.clear(gl.COLOR_BUFFER_BIT | gl.DEPTH_BUFFER_BIT);
      gl.enable(gl.DEPTH_TEST);
      var R = rotation(), c = scene.centre, rad = scene.radius;
      var k = [zoom / rad * h / w, zoom / rad, -1 / (rad * 1.05)];
      var m = new Float32Array(16), r3 = new Float32Array(9);
      for (var i = 0; i < 3; i++) {
        var t = 0;
        for (var j = 0; j < 3; j++) {
          m[j * 4 + i] = k[i] * R[i][j];
          r3[j * 3 + i] = R[i][j];
          t += R[i][j] * c[j];
        }
        m[12 + i] = -k[i] * t;
      }
      m[15] = 1;
      function attrib(prog, name, buf, size) {
        var loc = gl.getAttribLocation(prog, name);
        gl.bindBuffer(gl.ARRAY_BUFFER, buf);
        gl.enableVertexAttribArray(loc);
        gl.vertexAttribPointer(loc, size, gl.FLOAT, false, 0, 0);
        return loc;
      }
      gl.useProgram(lines);
      gl.uniformMatrix4fv(gl.getUniformLocation(lines, "m"), false, m);
      var lp = attrib(lines, "p", edgeBuf, 3);
      gl.uniform3f(gl.getUniformLocation(lines, "c"), 0.55, 0.55, 0.55);
      gl.drawArrays(gl.LINES, 0, ev.length / 3);
      gl.uniform3f(gl.getUniformLocation(lines, "c"), 0.1, 0.1, 0.1);
      axisBufs.forEach(function (b) { attrib(lines, "p", b, 3); gl.drawArrays(gl.LINES, 0, 2); });
      gl.disableVertexAttribArray(lp);
      if (showAtoms && scene.atoms.length) {
        gl.useProgram(dots);
        gl.uniformMatrix4fv(gl.getUniformLocation(dots, "m"), false, m);
        gl.uniform1f(gl.getUniformLocation(dots, "px"), zoom / rad * h / 2);
        var l1 = attrib(dots, "p", atomPos, 3), l2 = attrib(dots, "col", atomCol, 4);
        gl.drawArrays(gl.POINTS, 0, scene.atoms.length);
        gl.disableVertexAttribArray(l1);
        gl.disableVertexAttribArray(l2);
      }
      gl.useProgram(surf);
      gl.uniformMatrix4fv(gl.getUniformLocation(surf, "m"), false, m);
      gl.uniformMatrix3fv(gl.getUniformLocation(surf, "r"), false, r3);
      nets.forEach(function (n) {
        if (!n || !n.shown) { return; }
        var a1 = attrib(surf, "p", n.pos, 3), a2 = attrib(surf, "n", n.nor, 3);
        gl.uniform3f(gl.getUniformLocation(surf, "c"), n.colour[0], n.colour[1], n.colour[2]);
        gl.bindBuffer(gl.ELEMENT_ARRAY_BUFFER, n.idx);
        gl.drawElements(gl.TRIANGLES, n.count, n.type, 0);
        gl.disableVertexAttribArray(a1);
        gl.disableVertexAttribArray(a2);
      });
      // axis labels beyond the arrow tips, in CSS pixels
      scene.axes.forEach(function (v, i) {
        var o = scene.corner, tip = [o[0] + 1.12 * v[0], o[1] + 1.12 * v[1], o[2] + 1.12 * v[2]];
        var x = 0, y = 0;
        for (var j = 0; j < 3; j++) { x += m[j * 4] * tip[j]; y += m[j * 4 + 1] * tip[j]; }
        x += m[12]; y += m[13];
        labels[i].style.left = ((x + 1) / 2 * canvas.clientWidth - 5) + "px";
        labels[i].style.top = ((1 - y) / 2 * canvas.clientHeight - 10) + "px";
      });
    }
    function drawn() {
      // pixels that differ from the background: a marker the headless-browser check reads
      var w = canvas.width, h = canvas.height, px = new Uint8Array(w * h * 4), n = 0;
      gl.readPixels(0, 0, w, h, gl.RGBA, gl.UNSIGNED_BYTE, px);
      for (var i = 0; i < px.length; i += 4) {
        if (Math.abs(px[i] - 251) + Math.abs(px[i + 1] - 252) + Math.abs(px[i + 2] - 253) > 12) { n++; }
      }
      canvas.setAttribute("data-drawn-pixels", String(n));
    }
    var queued = false;
    function redraw() {
      if (queued) { return; }
      queued = true;
      window.requestAnimationFrame(function () { queued = false; draw(); });
    }

    Array.prototype.forEach.call(root.querySelectorAll("input[data-net]"), function (box) {
      var n = nets[Number(box.getAttribute("data-net"))];
      if (n) { n.shown = box.checked; }
      box.addEventListener("change", function () { if (n) { n.shown = box.checked; } redraw(); });
    });
    var atomBox = root.querySelector("input[data-atoms]");
    if (atomBox) {
      showAtoms = atomBox.checked;
      atomBox.addEventListener("change", function () { showAtoms = atomBox.checked; redraw(); });
    }
    var dragging = null;
    canvas.addEventListener("pointerdown", function (e) {
      dragging = [e.clientX, e.clientY];
      if (canvas.setPointerCapture) { canvas.setPointerCapture(e.pointerId); }
    });
    canvas.addEventListener("pointermove", function (e) {
      if (!dragging) { return; }
      yaw += (e.clientX - dragging[0]) * 0.4;
      pitch = Math.max(-89, Math.min(89, pitch + (e.clientY - dragging[1]) * 0.4));
      dragging = [e.clientX, e.clientY];
      redraw();
    });
    canvas.addEventListener("pointerup", function () { dragging = null; });
    canvas.addEventListener("pointercancel", function () { dragging = null; });
    canvas.addEventListener("wheel", function (e) {
      e.preventDefault();
      zoom = Math.max(0.3, Math.min(12, zoom * Math.exp(-e.deltaY * 0.0015)));
      redraw();
    }, { passive: false });
    canvas.addEventListener("dblclick", function () { yaw = scene.yaw; pitch = scene.pitch; zoom = 1; redraw(); });
    window.addEventListener("resize", redraw);
    draw();
    drawn();
  }
})();
