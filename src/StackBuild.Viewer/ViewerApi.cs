using System.Globalization;
using System.Text.Json;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Http;
using StackBuild.Imaging;
using StackBuild.IO;
using StackBuild.Reslice;

namespace StackBuild.Viewer;

/// <summary>
/// The viewer's API: <c>/api/volume</c> (what the page needs to set up), <c>/api/plane</c> (a plane's geometry as
/// JSON) and <c>/api/plane.png</c> (the plane itself, windowed, with the same geometry in the <c>X-Plane</c>
/// header). Requests are checked strictly; anything else is a 400 with a one-line reason.
/// </summary>
internal static class ViewerApi
{
    public const string PlaneHeader = "X-Plane";

    public static void Map(WebApplication app, ViewerVolume volume)
    {
        app.MapGet("/api/volume", (HttpContext context) =>
            context.Request.QueryString.HasValue
                ? ViewerServer.Problem(context, 400, "/api/volume takes no query parameters")
                : Json(context, volume.Describe()));

        app.MapGet("/api/plane", (HttpContext context) =>
        {
            if (!PlaneQuery.TryParse(context.Request.Query, out var query, out var problem))
                return ViewerServer.Problem(context, 400, problem);
            if (!TryBuild(volume, query, out var plane, out problem))
                return ViewerServer.Problem(context, 400, problem);
            return Json(context, PlaneDescription.Of(volume.Volume, query.Spec, plane, query.Interpolation));
        });

        app.MapGet("/api/plane.png", async (HttpContext context) =>
        {
            if (!PlaneQuery.TryParse(context.Request.Query, out var query, out var problem))
            {
                await ViewerServer.Problem(context, 400, problem);
                return;
            }
            if (!TryBuild(volume, query, out var plane, out problem))
            {
                await ViewerServer.Problem(context, 400, problem);
                return;
            }
            var image = Reslicer.Reslice(volume.Source, plane, new ResliceOptions(query.Interpolation, MaxThreads: 0));
            using var png = new MemoryStream();
            PlanePng.Write(png, image, query.Window, bits: 8, fast: true);
            var description = PlaneDescription.Of(volume.Volume, query.Spec, plane, query.Interpolation);
            // System.Text.Json escapes everything outside ASCII, so the header value stays plain ASCII.
            context.Response.Headers[PlaneHeader] = description.ToJson();
            context.Response.ContentType = "image/png";
            context.Response.ContentLength = png.Length;
            await context.Response.Body.WriteAsync(png.GetBuffer().AsMemory(0, (int)png.Length));
        });

        MapOverlays(app, volume);
    }

    private static void MapOverlays(WebApplication app, ViewerVolume volume)
    {
        app.MapGet("/api/overlay.png", async (HttpContext context) =>
        {
            if (!PlaneQuery.TryParse(context.Request.Query, out var query, out var problem, "layer", "style", "hue")
                || !TryLayer(context.Request.Query, volume, out var layer, out problem)
                || !TryStyle(context.Request.Query, layer, out var style, out int hue, out problem)
                || !TryBuild(volume, query, out var plane, out problem))
            {
                await ViewerServer.Problem(context, 400, problem);
                return;
            }
            var sampling = layer.Overlay.Labels ? ResliceSampling.Nearest : query.Interpolation;
            var image = Reslicer.Reslice(layer.Source, plane, new ResliceOptions(sampling, float.NaN, MaxThreads: 0));
            var pixels = style switch
            {
                "fill" => OverlayColours.Fill(image),
                "outline" => OverlayColours.Outline(image),
                _ => OverlayColours.Tint(image, query.Window, hue),
            };
            using var png = new MemoryStream();
            OverlayColours.WritePng(png, pixels, image.Width, image.Height);
            context.Response.ContentType = "image/png";
            context.Response.ContentLength = png.Length;
            await context.Response.Body.WriteAsync(png.GetBuffer().AsMemory(0, (int)png.Length));
        });

        app.MapGet("/api/probe", (HttpContext context) =>
        {
            var q = context.Request.Query;
            foreach (var key in q.Keys)
                if (key is not ("x" or "y" or "z") || q[key].Count != 1)
                    return ViewerServer.Problem(context, 400, $"/api/probe takes x, y and z (world mm) once each, not '{PlaneQuery.Shorten(key)}'");
            if (!PlaneQuery.Number(q, "x", out double x, out var problem) || !PlaneQuery.Number(q, "y", out double y, out problem)
                || !PlaneQuery.Number(q, "z", out double z, out problem))
                return ViewerServer.Problem(context, 400, problem);
            var mm = new Vector3D(x, y, z);
            var (value, voxel) = ViewerLayer.Probe(volume.Volume, mm);
            return Json(context, new
            {
                Mm = mm.ToArray(),
                Value = value,
                Voxel = voxel,
                Overlays = volume.Layers.Select(l =>
                {
                    var (v, at) = ViewerLayer.Probe(l.Overlay.Volume, mm);
                    return new { Value = v, Voxel = at };
                }).ToArray(),
            });
        });
    }

    private static bool TryLayer(IQueryCollection query, ViewerVolume volume, out ViewerLayer layer, out string problem)
    {
        layer = null!;
        problem = "";
        var text = query["layer"].ToString();
        if (!int.TryParse(text, NumberStyles.None, CultureInfo.InvariantCulture, out int index) || index >= volume.Layers.Count)
        {
            problem = volume.Layers.Count == 0 ? "this viewer was started without overlays (stackbuild view VOL --overlay OTHER.nii.gz)"
                : $"layer must be a number from 0 to {volume.Layers.Count - 1}, not '{PlaneQuery.Shorten(text)}'";
            return false;
        }
        layer = volume.Layers[index];
        return true;
    }

    private static bool TryStyle(IQueryCollection query, ViewerLayer layer, out string style, out int hue, out string problem)
    {
        problem = "";
        hue = 0;
        style = query.TryGetValue("style", out var s) ? s.ToString() : layer.Overlay.Labels ? "fill" : "tint";
        string[] allowed = layer.Overlay.Labels ? ["fill", "outline"] : ["tint"];
        if (!allowed.Contains(style, StringComparer.Ordinal))
        {
            problem = $"style of this {(layer.Overlay.Labels ? "label" : "intensity")} layer must be {string.Join(" or ", allowed)}, not '{PlaneQuery.Shorten(style)}'";
            return false;
        }
        var hueText = query.TryGetValue("hue", out var h) ? h.ToString() : "30";
        if (!int.TryParse(hueText, NumberStyles.None, CultureInfo.InvariantCulture, out hue) || hue > 359)
        {
            problem = $"hue must be a whole number of degrees from 0 to 359, not '{PlaneQuery.Shorten(hueText)}'";
            return false;
        }
        return true;
    }

    private static bool TryBuild(ViewerVolume volume, PlaneQuery query, out ReslicePlane plane, out string problem)
    {
        plane = null!;
        problem = "";
        try
        {
            plane = query.Spec.Build(volume.Volume);
            return true;
        }
        catch (InputProblemException e)
        {
            problem = e.Message;
            return false;
        }
    }

    private static Task Json(HttpContext context, object value)
    {
        context.Response.ContentType = "application/json; charset=utf-8";
        return context.Response.WriteAsync(JsonSerializer.Serialize(value, PlaneDescription.JsonOptions));
    }
}

/// <summary>
/// One plane request from the page: <c>plane</c> (orientation), <c>tiltH</c>, <c>tiltV</c> (degrees),
/// <c>depth</c> (mm), <c>low</c>, <c>high</c> (window), all required, and <c>sampling</c> (linear or nearest),
/// optional. Unknown, repeated, missing or malformed parameters are refused with a reason.
/// </summary>
internal sealed record PlaneQuery(PlaneSpec Spec, IntensityWindow Window, ResliceSampling Interpolation)
{
    private static readonly string[] Required = ["plane", "tiltH", "tiltV", "depth", "low", "high"];
    private static readonly string[] Optional = ["sampling"];

    /// <param name="extra">Further parameters the endpoint itself reads (optional here; the endpoint checks them).</param>
    public static bool TryParse(IQueryCollection query, out PlaneQuery result, out string problem, params string[] extra)
    {
        result = null!;
        foreach (var key in query.Keys)
        {
            if (!Required.Contains(key, StringComparer.Ordinal) && !Optional.Contains(key, StringComparer.Ordinal) && !extra.Contains(key, StringComparer.Ordinal))
            {
                problem = $"unknown parameter '{Shorten(key)}'; the parameters are {string.Join(", ", Required.Concat(Optional).Concat(extra))}";
                return false;
            }
            if (query[key].Count != 1)
            {
                problem = $"parameter '{key}' is given {query[key].Count} times; give it once";
                return false;
            }
        }
        var missing = Required.Where(k => !query.ContainsKey(k)).ToArray();
        if (missing.Length > 0)
        {
            problem = $"missing parameter{(missing.Length > 1 ? "s" : "")} {string.Join(", ", missing)}";
            return false;
        }
        foreach (var key in query.Keys)
        {
            var value = query[key].ToString();
            if (value.Contains('/') || value.Contains('\\') || value.Contains("..") || value.Contains('\0'))
            {
                problem = $"parameter '{key}' looks like a file path; this viewer shows only the volume it was started with";
                return false;
            }
        }
        if (!PlaneOrientation.TryParse(query["plane"], out var orientation, out problem)) return false;
        if (!Number(query, "tiltH", out double tiltH, out problem) || !Number(query, "tiltV", out double tiltV, out problem)
            || !Number(query, "depth", out double depth, out problem) || !Number(query, "low", out double low, out problem)
            || !Number(query, "high", out double high, out problem))
            return false;
        foreach (var (name, degrees) in new[] { ("tiltH", tiltH), ("tiltV", tiltV) })
        {
            if (Math.Abs(degrees) > PlaneSpec.MaxTiltDeg)
            {
                problem = $"{name} must be between −{PlaneSpec.MaxTiltDeg} and {PlaneSpec.MaxTiltDeg} degrees, not {degrees.ToString(CultureInfo.InvariantCulture)}";
                return false;
            }
        }
        if (!(high > low))
        {
            problem = "high must be greater than low";
            return false;
        }
        var sampling = query.TryGetValue("sampling", out var s) ? s.ToString() : "linear";
        if (sampling is not ("linear" or "nearest"))
        {
            problem = $"sampling must be linear or nearest, not '{Shorten(sampling)}'";
            return false;
        }
        result = new PlaneQuery(new PlaneSpec(orientation, tiltH, tiltV, depth), new IntensityWindow(low, high),
            sampling == "nearest" ? ResliceSampling.Nearest : ResliceSampling.Linear);
        return true;
    }

    internal static bool Number(IQueryCollection query, string key, out double value, out string problem)
    {
        var text = query[key].ToString();
        problem = "";
        if (text.Length <= 40 && double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out value) && double.IsFinite(value))
            return true;
        value = 0;
        problem = $"parameter '{key}' must be a finite number, not '{Shorten(text)}'";
        return false;
    }

    internal static string Shorten(string text)
    {
        var clean = new string(text.Select(c => char.IsControl(c) ? '?' : c).ToArray());
        return clean.Length <= 40 ? clean : clean[..40] + "…";
    }
}
