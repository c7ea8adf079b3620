namespace Bitbudget.Service.Commands;

/// <summary>One sentence naming the file for an I/O failure, in place of the runtime's message (which may name no file, or a path the user did not type).</summary>
internal static class FileErrors
{
    /// <param name="what">What the file is for, e.g. "the dataset (--data)".</param>
    public static string CannotRead(string what, string path, Exception e) => $"Cannot read {what} '{path}': {Reason(path, e, writing: false)}.";

    public static string CannotWrite(string path, Exception e) => $"Cannot write to '{path}': {Reason(path, e, writing: true)}.";

    private static string Reason(string path, Exception e, bool writing) => e switch
    {
        FileNotFoundException or DirectoryNotFoundException when writing => "files cannot be created there",
        FileNotFoundException => "no such file",
        DirectoryNotFoundException => "a folder on its path does not exist",
        UnauthorizedAccessException => "permission denied",
        PathTooLongException => "the path is too long",
        IOException when !writing && Directory.Exists(path) => "it is a folder, not a file",
        IOException when writing && File.Exists(path) => "it is a file, not a folder",
        IOException when writing && FileOnPath(path) is { } file => $"'{file}' on its path is a file, not a folder",
        _ => e.Message.TrimEnd('.'),
    };

    private static string? FileOnPath(string path)
    {
        for (var folder = Path.GetDirectoryName(Path.GetFullPath(path)); folder is not null; folder = Path.GetDirectoryName(folder))
        {
            if (File.Exists(folder))
            {
                return folder;
            }
        }

        return null;
    }
}
