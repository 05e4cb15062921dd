using System.CommandLine;
using DriftWatch.Charts;
using DriftWatch.Detection;

namespace DriftWatch.Cli;

/// <summary><c>driftwatch policy</c>: every setting of the gate's policy, its value, default, range and meaning.</summary>
internal static class PolicyCommand
{
    /// <summary>Builds the command.</summary>
    public static Command Create()
    {
        var file = new Option<string?>("--policy") { Description = "A gate policy JSON file to read and show (every problem in it is named). Default: the built-in policy.", HelpName = "FILE" };
        var json = CommonOptions.Json("the policy (a complete policy file, every key written: a starting point to edit)");
        var command = new Command(
            "policy",
            "Show the gate's policy: every setting with its value, its built-in default, the values it accepts and what it means.\n"
            + "The same table reads and checks policy files, so what this lists is exactly what --policy accepts.\n"
            + "Examples:\n"
            + "  driftwatch policy\n"
            + "  driftwatch policy --json > policy.json\n"
            + "  driftwatch policy --policy policy.json\n"
            + ExitCodes.Help(
                (ExitCodes.Fine, "done"),
                (ExitCodes.BadInput, "bad input (a policy file that is missing, not JSON, or has unknown keys or values out of range)"),
                (ExitCodes.InternalError, "internal error")))
        {
            file,
            json,
        };
        command.SetAction(parse =>
        {
            var output = parse.InvocationConfiguration.Output;
            string? path = parse.GetValue(file);
            var policy = path is null ? GatePolicy.Default : GatePolicy.Load(path);
            if (parse.GetValue(json))
            {
                output.WriteLine(policy.ToJson());
                return ExitCodes.Fine;
            }
            output.WriteLine(path is null
                ? "The built-in gate policy (a policy file's keys left out keep these values):"
                : $"The gate policy in {DisplayText.Clean(path)} (* differs from the built-in value):");
            output.WriteLine();
            int width = GatePolicy.Settings.Max(setting => setting.Key.Length);
            foreach (var setting in GatePolicy.Settings)
            {
                string value = setting.Text(policy);
                string differs = value == setting.DefaultText ? "" : $" *  (built-in {DisplayText.Clean(setting.DefaultText)})";
                output.WriteLine($"{setting.Key.PadRight(width)}  {DisplayText.Clean(value)}{differs}");
                output.WriteLine($"{new string(' ', width)}  accepts {setting.Allowed}. {setting.Meaning}");
            }
            return ExitCodes.Fine;
        });
        return command;
    }
}
