using System.CommandLine;
using System.Net;
using StackBuild.IO;
using StackBuild.Viewer;

namespace StackBuild.Cli.Commands;

public static class ViewCommand
{
    public static Command Create(CliOutput console)
    {
        var volumeArg = new Argument<string>("VOL") { Description = "The volume to show (NIfTI-1, .nii or .nii.gz)." };
        var port = new Option<string?>("--port") { Description = "Port to listen on (default 0: any free port; the address is printed)." };
        var listen = new Option<string>("--listen")
        {
            Description = "Address to listen on (default 127.0.0.1, this computer only). Any other address lets other computers see the volume.",
            DefaultValueFactory = _ => "127.0.0.1",
        };
        var overlay = new Option<string[]>("--overlay")
        {
            Description = "Another volume to show over this one, resampled through both affines (any grid): a second channel, a template, " +
                          "a label volume. Repeat for more. Integer volumes with at most 64 values (or a label intent) are shown as labels.",
            Arity = ArgumentArity.OneOrMore,
        };
        var labels = new Option<string[]>("--labels")
        {
            Description = "Like --overlay, but always shown as labels (flat colours or outlines, the label number under the cursor).",
            Arity = ArgumentArity.OneOrMore,
        };
        var command = new Command("view",
            "Show a volume in your web browser: three planes through a shared cursor and one plane at any angle, with overlays.\n" +
            "The page's address holds the view, so it can be bookmarked. Stop with Ctrl+C.\n\n" +
            "Examples:\n  stackbuild view volume.nii.gz --port 8080\n" +
            "  stackbuild view volume.nii.gz --overlay second-stain.nii.gz --labels regions.nii.gz")
        {
            volumeArg, port, listen, overlay, labels,
        };
        command.SetAction((parse, cancellation) => Task.FromResult(console.Guard(() =>
        {
            var path = parse.GetValue(volumeArg)!;
            var portText = parse.GetValue(port) ?? "0";
            if (!int.TryParse(portText, System.Globalization.NumberStyles.None, System.Globalization.CultureInfo.InvariantCulture, out int portNumber) || portNumber > 65535)
                throw new InputProblemException(null, $"--port must be a number from 0 to 65535, not '{portText}'", "give a free port, or 0 to pick one");
            var listenText = parse.GetValue(listen) ?? "127.0.0.1";
            var address = listenText == "localhost" ? IPAddress.Loopback : IPAddress.TryParse(listenText, out var a) ? a
                : throw new InputProblemException(null, $"--listen '{listenText}' is not an IP address", "give an address such as 127.0.0.1 or 0.0.0.0");
            var volume = VolumeInput.Load(path, console.Error);
            var overlays = new List<ViewerOverlay>();
            foreach (var (file, forceLabels) in (parse.GetValue(overlay) ?? []).Select(f => (f, false)).Concat((parse.GetValue(labels) ?? []).Select(f => (f, true))))
            {
                var (other, header) = VolumeInput.LoadWithHeader(file, console.Error);
                bool asLabels = forceLabels || ViewerOverlay.LooksLikeLabels(other, header.DataType is StackBuild.Nifti.NiftiDataType.UInt8 or StackBuild.Nifti.NiftiDataType.Int8 or StackBuild.Nifti.NiftiDataType.Int16 or StackBuild.Nifti.NiftiDataType.UInt16 or StackBuild.Nifti.NiftiDataType.Int32, header.IntentCode);
                overlays.Add(new ViewerOverlay(other, Path.GetFileName(file), asLabels));
            }
            var sections = ViewerSection.FromSidecar(path, volume, console.Error);
            if (!IPAddress.IsLoopback(address))
                console.Error.WriteLine($"warning: listening on {address}: anyone who can reach this computer can see this volume");
            ViewerServer server;
            try
            {
                server = ViewerServer.StartAsync(volume, Path.GetFileName(path), address, portNumber,
                    new ViewerOptions { Overlays = overlays, Sections = sections }, cancellation).GetAwaiter().GetResult();
            }
            catch (IOException e)
            {
                throw new InputProblemException(null, $"cannot listen on {address}:{portNumber} ({e.Message})", "choose another --port, or 0 for any free one");
            }
            try
            {
                console.Out.WriteLine($"viewing {path}{(overlays.Count > 0 ? $" with {overlays.Count} overlay{(overlays.Count > 1 ? "s" : "")}" : "")} at {server.Url}");
                console.Out.WriteLine("press Ctrl+C to stop");
                console.Out.Flush();
                server.WaitForShutdownAsync(cancellation).GetAwaiter().GetResult();
            }
            finally
            {
                server.DisposeAsync().AsTask().GetAwaiter().GetResult();
            }
            // Ctrl+C (SIGINT) or SIGTERM is how a viewer is meant to stop: a normal end, said in one line.
            console.Out.WriteLine($"stopped: {server.Url} is closed");
            return CliOutput.ExitOk;
        })));
        return command;
    }
}
